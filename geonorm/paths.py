"""Where geonorm keeps its files: the place index, the default cache, the curated tables."""

from __future__ import annotations

import os
from importlib import resources
from pathlib import Path

from .errors import PlaceIndexError

__all__ = ["data_dir", "gazetteer_dir"]


def data_dir() -> Path:
    """``$GEONORM_HOME``, else the user's data directory for geonorm."""
    env = os.environ.get("GEONORM_HOME")
    if env:
        return Path(env)
    import platformdirs

    return Path(platformdirs.user_data_dir("geonorm", appauthor=False))


def gazetteer_dir() -> Path:
    """The curated tables: inside the installed package, or the source tree."""
    packaged = Path(str(resources.files("geonorm"))) / "_gazetteer"
    if packaged.is_dir():
        return packaged
    source = Path(__file__).resolve().parents[1] / "gazetteer"
    if source.is_dir():
        return source
    raise PlaceIndexError(
        "the curated gazetteer tables are missing from this installation",
        hint="reinstall geonorm (pip install --force-reinstall geonorm)",
    )
