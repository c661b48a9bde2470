"""geonorm: resolve free-text location fields to ISO 3166 places, offline."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from .errors import (
    CacheError,
    GeonormError,
    IndexError_,
    InputError,
    PlaceIndexError,
    RemoteError,
)
from .resolve.index import PlaceIndex, build_index, load_index
from .resolve.normalize import Query, normalize
from .resolve.resolution import Candidate, Reason, Resolution, Status
from .resolve.resolver import DEFAULT_ACCEPT, Resolver
from .version import __version__

if TYPE_CHECKING:
    from .batch.cache import Cache
    from .batch.clean import CleanSummary, resolve_series
    from .batch.options import CleanOptions, RemoteOptions


__all__ = [
    "DEFAULT_ACCEPT",
    "Cache",
    "CacheError",
    "Candidate",
    "CleanOptions",
    "CleanSummary",
    "GeonormError",
    "IndexError_",
    "InputError",
    "PlaceIndex",
    "PlaceIndexError",
    "Query",
    "Reason",
    "RemoteError",
    "RemoteOptions",
    "Resolution",
    "Resolver",
    "Status",
    "__version__",
    "build_index",
    "clean_file",
    "load_index",
    "normalize",
    "resolve_series",
]

# Imported on first use: polars and the cache cost a third of a second at start-up,
# which a single lookup does not need.
_LAZY = {
    "CleanSummary": "batch.clean",
    "resolve_series": "batch.clean",
    "Cache": "batch.cache",
    "CleanOptions": "batch.options",
    "RemoteOptions": "batch.options",
}


def clean_file(*args: Any, **kwargs: Any) -> CleanSummary:
    """Clean a file (``geonorm.batch.clean.clean_file``), drawing an HTML run report
    with ``geonorm.figures.report`` when ``report`` ends in .html."""
    from .batch.clean import clean_file as clean
    from .figures.report import report_html

    kwargs.setdefault("report_page", report_html)
    return clean(*args, **kwargs)


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(f".{_LAZY[name]}", __name__), name)
    raise AttributeError(f"module 'geonorm' has no attribute {name!r}")
