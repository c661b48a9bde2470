"""geonorm: resolve free-text location fields to ISO 3166 places, offline."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from .cache import Cache
from .errors import CacheError, GeonormError, IndexError_, InputError
from .index import PlaceIndex, build_index, load_index
from .normalize import Query, normalize
from .resolution import Candidate, Reason, Resolution, Status
from .resolver import DEFAULT_ACCEPT, Resolver

if TYPE_CHECKING:
    from .batch import CleanSummary, clean_file, resolve_series

__version__ = "0.1.0"

__all__ = [
    "Cache", "CacheError", "Candidate", "CleanSummary", "DEFAULT_ACCEPT", "GeonormError", "IndexError_",
    "InputError", "PlaceIndex", "Query", "Reason", "Resolution", "Resolver", "Status", "__version__",
    "build_index", "clean_file", "load_index", "normalize", "resolve_series",
]

_LAZY = {"CleanSummary", "clean_file", "resolve_series"}  # need polars: imported on first use


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        from . import batch

        return getattr(batch, name)
    raise AttributeError(f"module 'geonorm' has no attribute {name!r}")
