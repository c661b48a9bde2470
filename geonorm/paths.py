"""Where geonorm keeps its files: the place index and the default cache."""

from __future__ import annotations

import os
from pathlib import Path

__all__ = ["data_dir"]


def data_dir() -> Path:
    """``$GEONORM_HOME``, else the user's data directory for geonorm."""
    env = os.environ.get("GEONORM_HOME")
    if env:
        return Path(env)
    import platformdirs

    return Path(platformdirs.user_data_dir("geonorm", appauthor=False))
