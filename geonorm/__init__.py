"""geonorm: resolve free-text location fields to ISO 3166 places, offline."""

from .batch import CleanSummary, clean_file, resolve_series
from .cache import Cache
from .errors import CacheError, GeonormError, IndexError_, InputError
from .index import PlaceIndex, build_index, load_index
from .normalize import Query, normalize
from .resolution import Candidate, Reason, Resolution, Status
from .resolver import DEFAULT_ACCEPT, Resolver

__version__ = "0.1.0"

__all__ = [
    "Cache", "CacheError", "Candidate", "CleanSummary", "DEFAULT_ACCEPT", "GeonormError", "IndexError_",
    "InputError", "PlaceIndex", "Query", "Reason", "Resolution", "Resolver", "Status", "__version__",
    "build_index", "clean_file", "load_index", "normalize", "resolve_series",
]
