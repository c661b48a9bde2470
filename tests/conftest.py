"""Shared fixtures. The place index is built once per machine (first use) and reused."""

from __future__ import annotations

import pytest

from geonorm import Resolver


@pytest.fixture(scope="session")
def resolver() -> Resolver:
    return Resolver()
