"""Settings of a cleaning run, validated when they are made.

``CleanOptions`` holds what a user chooses for one run of ``clean_file``;
``RemoteOptions`` what they choose for the optional remote geocoder. Both
refuse a bad value at construction with an ``InputError`` naming the field
(in backquotes, which the CLI shows as the matching flag), so the Python API
and the CLI refuse the same mistakes with the same words.
"""

from __future__ import annotations

from dataclasses import dataclass, fields
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..errors import InputError
from ..resolve.resolver import DEFAULT_ACCEPT

if TYPE_CHECKING:
    import httpx

    from .remote import RemoteAdapter

__all__ = ["CleanOptions", "RemoteOptions"]


@dataclass(frozen=True, kw_only=True)
class RemoteOptions:
    """The remote geocoder stage.

    ``adapter`` is a TOML adapter file, the name of an adapter installed as a
    ``geonorm.remote`` entry point, or an adapter object. ``budget`` caps the
    requests of this run, ``budget_total`` those across runs (counted in the
    cache); ``refresh`` asks again for strings answered before; ``dry_run`` lists
    what would be sent and sends and writes nothing. ``transport`` replaces the
    HTTP transport (tests use it).
    """

    adapter: str | Path | RemoteAdapter
    budget: int | None = None
    budget_total: int | None = None
    refresh: bool = False
    dry_run: bool = False
    transport: httpx.BaseTransport | None = None

    def __post_init__(self) -> None:
        for name in ("budget", "budget_total"):
            value = getattr(self, name)
            if value is not None and (not isinstance(value, int) or value < 0):
                raise InputError(
                    f"`{name}` must be a whole number of requests, 0 or more, got {value!r}",
                    hint=f"set `{name}` to 0 or more, or leave it out for no limit",
                )
        if isinstance(self.adapter, str) and not self.adapter.strip():
            raise InputError(
                "`remote` is empty", hint="give a TOML adapter file or an installed adapter's name"
            )


@dataclass(frozen=True, kw_only=True)
class CleanOptions:
    """How to clean one file.

    ``accept``: confidence needed for ``matched``; ``prefix``: of the added
    columns; ``encoding``/``separator``/``input_format``: how to read the input
    (sniffed when left out); ``format``: of the output (from its extension when
    left out); ``workers``: processes resolving new strings (default: the number
    of cores); ``bad_lines``: where rows with the wrong number of fields go
    (without it they stop the run); ``report``: a JSON summary file;
    ``remote``: the optional remote geocoder stage.
    """

    accept: float = DEFAULT_ACCEPT
    prefix: str = "geo_"
    encoding: str = "utf-8"
    separator: str | None = None
    format: str | None = None
    input_format: str | None = None
    workers: int | None = None
    bad_lines: str | Path | None = None
    report: str | Path | None = None
    remote: RemoteOptions | None = None

    def __post_init__(self) -> None:
        if not isinstance(self.accept, (int, float)) or not 0.0 <= self.accept <= 1.0:
            raise InputError(
                f"`accept` must be between 0 and 1, got {self.accept!r}",
                hint="use a probability such as 0.8",
            )
        if self.workers is not None and (not isinstance(self.workers, int) or self.workers < 1):
            raise InputError(
                f"`workers` must be at least 1, got {self.workers!r}",
                hint="set `workers` to 1 or more",
            )
        if not self.prefix or not self.prefix.strip():
            raise InputError("`prefix` is empty", hint="use a prefix such as geo_")
        if self.separator is not None and len(self.separator) != 1:
            raise InputError(
                f"`separator` must be one character, got {self.separator!r}",
                hint="use , or ; or a tab",
            )

    @classmethod
    def build(cls, **settings: Any) -> CleanOptions:
        """Options from keyword arguments, with the remote ones gathered.

        Accepts the flat keywords of ``clean_file`` (``remote=``, ``budget=``,
        ``budget_total=``, ``refresh=``, ``dry_run=``, ``transport=``) and
        refuses unknown ones, and remote settings without a remote.
        """
        remote_keys = {f.name for f in fields(RemoteOptions)} - {"adapter"}
        remote_settings = {k: settings.pop(k) for k in list(settings) if k in remote_keys}
        adapter = settings.pop("remote", None)
        unknown = sorted(set(settings) - {f.name for f in fields(cls)})
        if unknown:
            raise InputError(
                f"unknown option(s): {', '.join(unknown)}",
                hint="see help(geonorm.CleanOptions) for the options of a cleaning run",
            )
        given = [k for k, v in remote_settings.items() if v is not None and v is not False]
        if adapter is None:
            if given:
                named = ", ".join(f"`{k}`" for k in given)
                raise InputError(
                    f"{named} only apply with `remote`",
                    hint="add `remote` (a TOML adapter file), or drop those options",
                )
            return cls(**settings)
        if isinstance(adapter, RemoteOptions):
            return cls(remote=adapter, **settings)
        return cls(remote=RemoteOptions(adapter=adapter, **remote_settings), **settings)
