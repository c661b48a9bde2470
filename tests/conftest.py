"""Shared fixtures. The place index is built once per machine (first use) and reused."""

from __future__ import annotations

import sqlite3
import subprocess
import time
from pathlib import Path

import pytest

from geonorm import Resolver


@pytest.fixture(scope="session")
def resolver() -> Resolver:
    return Resolver()


def wait_for_rows(
    proc: subprocess.Popen, db: Path, table: str, n: int, timeout: float = 120
) -> int:
    """Poll ``table`` of the SQLite file ``db`` while ``proc`` runs, until it holds ``n`` rows."""
    deadline = time.time() + timeout
    rows = 0
    while time.time() < deadline and proc.poll() is None and rows < n:
        time.sleep(0.05)
        if db.exists():
            try:
                with sqlite3.connect(db, timeout=1) as conn:
                    rows = conn.execute(f"SELECT count(*) FROM {table}").fetchone()[0]
            except sqlite3.DatabaseError:
                continue  # the table may not exist yet
    return rows
