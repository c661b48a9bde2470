"""Reading and writing the tables geonorm cleans: CSV, TSV, Parquet, JSON Lines.

Every column is read as text (CSV, TSV) or with its own type (Parquet), so
nothing but the added geo columns changes; rows keep their order. Files are
read twice in a streaming way, in bounded chunks: once for the location column
(distinct values and counts), once to write the output, so memory follows the
number of distinct strings, not the number of rows. A small CSV or TSV file is
held in memory instead (``hold``): read once, each row's geo columns taken by
its position among the distinct values, the same bytes written. JSON Lines
records are parsed here, keeping the original text of each value, so both
passes read a record's location the same way and nothing is keyed on a
re-serialised value.

Every file a run writes (the output, the bad lines, the report) is a
``Target``, checked before any work: not the input, not another file of the
same run, not a folder, device or pipe, in a folder that exists and can be
written. It is written to a partial file ``.<name>.geonorm-partial-<pid>``
beside it and renamed over it only when complete and, for the output, only
when it holds exactly as many rows as the input. A later run removes the
partial files a killed run left for the same name.
"""

from __future__ import annotations

import codecs
import contextlib
import csv
import io
import json
import os
import re
import shutil
import stat
import sys
import tempfile
from collections import Counter
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import polars as pl

from ..errors import GeonormError, InputError
from .schema import GEO_FIELDS, NUMERIC_FIELDS, GeoRow

__all__ = [
    "FORMATS",
    "Source",
    "Target",
    "as_text_row",
    "check_targets",
    "check_writable_as",
    "count_values",
    "distinct_values",
    "find_ragged",
    "format_of_name",
    "geo_table",
    "hold",
    "lazy_table",
    "open_source",
    "output_format",
    "per_distinct",
    "printable",
    "quoted",
    "read_columns",
    "read_header",
    "set_aside",
    "write_output",
    "writing",
]

FORMATS = ("csv", "tsv", "parquet", "jsonl")
_EXTENSIONS = {
    ".csv": "csv",
    ".txt": "csv",
    ".tsv": "tsv",
    ".tab": "tsv",
    ".parquet": "parquet",
    ".pq": "parquet",
    ".jsonl": "jsonl",
    ".ndjson": "jsonl",
    ".json": "jsonl",
}
# File signatures of formats people pass by mistake (common practice: magic numbers).
_MAGIC = {
    b"PK\x03\x04": "a ZIP archive (an .xlsx workbook is one)",
    b"%PDF": "a PDF document",
    b"\x89PNG": "a PNG image",
    b"\x1f\x8b": "a gzip archive",
    b"\xd0\xcf\x11\xe0": "an old Excel (.xls) file",
    b"\xff\xd8\xff": "a JPEG image",
    b"SQLite format 3": "an SQLite database",
}
_HEAD = 8192  # bytes read to tell what a file is
# A CSV or TSV file up to this size is read into memory once for both passes (counting
# and writing); a larger one is streamed twice, so memory follows its distinct values.
IN_MEMORY_BYTES = 128 << 20
_WRITE_ROWS = 1 << 17  # rows of a held table written at once
# Streaming a CSV file not held in memory, polars reads it in chunks of this many bytes
# (its POLARS_CSV_CHUNK_SIZE; its own chunks are far larger) and counts rows by reading,
# not through a map of the whole file (POLARS_NO_FAST_FILE_COUNT): memory then follows
# the distinct values, not the size of the file. What is read and written is the same
# (a Parquet output keeps polars' own chunks: its row groups follow them).
_STREAMING = {"POLARS_CSV_CHUNK_SIZE": str(4 << 20), "POLARS_NO_FAST_FILE_COUNT": "1"}
# Control bytes other than tab, line feed and carriage return. Text holds almost none;
# random or binary data about one byte in nine (30 of 256 values). More than one in
# twenty, and at least four, means binary (from memory, not tuned).
_CONTROL = bytes([*range(0x00, 0x09), 0x0B, 0x0C, *range(0x0E, 0x20), 0x7F])
_PARTIAL = ".geonorm-partial-"  # .<output name>.geonorm-partial-<pid>, beside the output
_WORK = "geonorm-work-"  # geonorm-work-<pid>-…, in the system's temporary folder
_POLARS_ERRORS: tuple[type[BaseException], ...] = (
    pl.exceptions.PolarsError,
    pl.exceptions.PanicException,  # a fault inside polars: still a message, not a traceback
    OSError,
    UnicodeDecodeError,
)
_SERIES_ERRORS: tuple[type[BaseException], ...] = (
    TypeError,
    ValueError,
    OverflowError,
    *_POLARS_ERRORS,
)
_SURROGATE = re.compile(r"\\u[dD][89a-fA-F][0-9a-fA-F]{2}")
csv.field_size_limit(min(sys.maxsize, 2**31 - 1))


@dataclass
class Source:
    name: str  # as the user gave it, for messages
    path: Path  # a readable file in UTF-8 with line feeds (stdin and other files are copied)
    format: str
    separator: str = ","
    temp: list[Path] = field(default_factory=list)
    columns: list[str] | None = None  # the header, once read
    notes: list[str] = field(default_factory=list)  # what reading did that a user should know
    frame: pl.DataFrame | None = None  # the whole table, read once, when it is small (``hold``)
    # Of a held table: a column's distinct values and each row's position among them
    # (``distinct_values``), for the write to take each row's geo columns by position.
    positions: dict[str, tuple[pl.Series, pl.Series]] = field(default_factory=dict)

    def cleanup(self) -> None:
        for p in self.temp:
            with contextlib.suppress(OSError):
                p.unlink()


@contextlib.contextmanager
def _bounded_reads(bounded: bool = True) -> Iterator[None]:
    """Polars reads files in bounded chunks (``_STREAMING``) while the block runs, unless
    not ``bounded``; a setting the user gave polars stays as it is."""
    added = [name for name in _STREAMING if bounded and name not in os.environ]
    os.environ.update({name: _STREAMING[name] for name in added})
    try:
        yield
    finally:
        for name in added:
            os.environ.pop(name, None)


def printable(text: str, limit: int = 200) -> str:
    """``text`` safe to show on a terminal: control and format characters escaped, cut at
    ``limit`` characters. Text read from a file is never echoed raw."""
    cut = text if len(text) <= limit else text[:limit] + "…"
    return "".join(c if c.isprintable() else repr(c)[1:-1] for c in cut)


def quoted(name: str, limit: int = 60) -> str:
    """A column name for a message: quoted, escaped like ``repr``, long names cut."""
    return repr(name if len(name) <= limit else name[:limit] + "…")


# --- work files and partial files ---------------------------------------------------------


def _tempfile(suffix: str) -> Path:
    """A private work file in the system's temporary folder, named with this process's id so
    that a later run removes it if this one is killed."""
    fd, name = tempfile.mkstemp(prefix=f"{_WORK}{os.getpid()}-", suffix=suffix)
    os.close(fd)
    return Path(name)


def _alive(pid: int) -> bool:
    """Whether process ``pid`` may still run (when in doubt, yes)."""
    if os.name != "posix" or pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:
        return True
    return True


def _remove_stale(folder: Path, prefix: str) -> None:
    """Remove this user's files ``<prefix><pid>…`` in ``folder`` whose process has ended."""
    if os.name != "posix":
        return
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return
    for entry in entries:
        if not entry.name.startswith(prefix):
            continue
        pid = entry.name[len(prefix) :].split("-", 1)[0]
        with contextlib.suppress(OSError):
            st = entry.stat(follow_symlinks=False)
            if (
                pid.isdigit()
                and stat.S_ISREG(st.st_mode)
                and st.st_uid == os.getuid()
                and not _alive(int(pid))
            ):
                os.unlink(entry.path)


@dataclass
class Target:
    """A file a run writes: where it goes, how messages name it, the mode it gets."""

    label: str  # "the output", "the `report` file" …
    given: str  # as the user gave it
    path: Path | None = None  # symlinks followed; None for standard output
    mode: int = 0o600

    @property
    def partial(self) -> Path:
        assert self.path is not None
        return self.path.parent / f".{self.path.name}{_PARTIAL}{os.getpid()}"

    def begin(self) -> Path:
        """Create the (private) partial file to write into."""
        if self.path is None:
            return _tempfile(".out")
        partial = self.partial
        partial.unlink(missing_ok=True)
        os.close(os.open(partial, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600))
        return partial

    def finish(self, tmp: Path) -> None:
        """Put the complete partial file in place (or copy it to standard output)."""
        if self.path is None:
            with open(tmp, "rb") as fh:
                shutil.copyfileobj(fh, sys.stdout.buffer, 1 << 20)
            sys.stdout.buffer.flush()
            return
        os.chmod(tmp, self.mode)
        os.replace(tmp, self.path)


@contextlib.contextmanager
def writing(target: Target) -> Iterator[Path]:
    """A partial file to write ``target`` into: put in place when the block ends without an
    error, removed otherwise."""
    tmp: Path | None = None
    try:
        tmp = target.begin()
        yield tmp
        target.finish(tmp)
    except OSError as exc:
        raise InputError(
            f"cannot write {target.label} {target.given} ({exc.strerror or exc})",
            hint="check the folder is writable and the disk has space",
        ) from exc
    finally:
        if tmp is not None:
            with contextlib.suppress(OSError):
                tmp.unlink()


def _stat(path: Path) -> os.stat_result | None:
    try:
        return os.stat(path)
    except OSError:
        return None


def _same(a: Path | None, sa: os.stat_result | None, b: Path | None, sb: os.stat_result | None):
    return (a is not None and a == b) or (
        sa is not None and sb is not None and os.path.samestat(sa, sb)
    )


def _input_identity(input: str | Path) -> tuple[Path | None, os.stat_result | None]:
    """The input's real path and status; for standard input, the file it was redirected from."""
    if str(input) == "-":
        try:
            st = os.fstat(sys.stdin.fileno())
        except (AttributeError, OSError, ValueError):
            return None, None
        return None, st if stat.S_ISREG(st.st_mode) else None
    real = Path(os.path.realpath(input))
    return real, _stat(real)


_KINDS: tuple[tuple[Callable[[int], bool], str], ...] = (
    (stat.S_ISDIR, "a folder"),
    (stat.S_ISCHR, "a device"),
    (stat.S_ISBLK, "a device"),
    (stat.S_ISFIFO, "a named pipe"),
    (stat.S_ISSOCK, "a socket"),
)


def _refuse_special(label: str, given: str, st: os.stat_result) -> None:
    kind = next((k for test, k in _KINDS if test(st.st_mode)), "not a regular file")
    if kind == "a folder":
        raise InputError(f"{label} {given} is a folder", hint="name a file inside it")
    raise InputError(
        f"{label} {given} is {kind}, not a regular file; geonorm only writes regular files",
        hint="name a regular file; to throw the output away, write to standard output (-) "
        "and redirect that to /dev/null",
    )


def _probe(label: str, given: str, target: Path) -> int:
    """Check a new file can be made in ``target``'s folder; the mode new files get there."""
    folder = Path(os.path.dirname(given) or ".")
    if not target.parent.exists():
        raise InputError(
            f"cannot write {label} {given}: the folder {folder} does not exist",
            hint="create the folder first, or choose another path",
        )
    if not target.parent.is_dir():
        raise InputError(
            f"cannot write {label} {given}: {folder} is not a folder", hint="choose another path"
        )
    probe = target.parent / f".{target.name}{_PARTIAL}{os.getpid()}"
    try:
        probe.unlink(missing_ok=True)  # named with this process's id: left by an earlier one
        fd = os.open(probe, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
        try:
            return stat.S_IMODE(os.fstat(fd).st_mode)
        finally:
            os.close(fd)
            probe.unlink()
    except OSError as exc:
        raise InputError(
            f"cannot write {label} {given}: the folder {folder} is not writable "
            f"({exc.strerror or exc})",
            hint="choose a folder you can write to",
        ) from exc


def check_targets(
    input: str | Path, outputs: Mapping[str, tuple[str, str | Path | None]]
) -> dict[str, Target]:
    """Check the files a run will write, before any work; ``outputs`` maps a key to (label for
    messages, path or None). ``"-"`` as ``output`` is standard output.

    Refused: a path that is the input (same real path, or same file through a link), or
    another file of the run; an existing folder, device, pipe or socket; a folder that is
    missing or cannot be written. A new file gets the input's read and write permissions, a
    replaced file keeps its own. Partial files left by killed runs for the same names go.
    """
    in_real, in_st = _input_identity(input)
    done: dict[str, tuple[Target, os.stat_result | None]] = {}
    for key, (label, given) in outputs.items():
        if given is None:
            continue
        name = str(given)
        if key == "output" and name == "-":
            done[key] = (Target(label, "standard output"), None)
            continue
        real = Path(os.path.realpath(name))
        st = _stat(real)
        if st is not None and not stat.S_ISREG(st.st_mode):
            _refuse_special(label, name, st)
        if _same(real, st, in_real, in_st):
            raise InputError(
                f"{label} {name} is the input file",
                hint="write to another file: geonorm never replaces its input",
            )
        for other, other_st in done.values():
            if _same(real, st, other.path, other_st):
                raise InputError(
                    f"{label} {name} is also {other.label}",
                    hint="give each file of the run its own name",
                )
        new_mode = _probe(label, name, real)
        _remove_stale(real.parent, f".{real.name}{_PARTIAL}")
        if st is not None:
            mode = stat.S_IMODE(st.st_mode)
        elif in_st is not None:
            mode = stat.S_IMODE(in_st.st_mode) & 0o666
        else:
            mode = new_mode
        done[key] = (Target(label, name, real, mode), st)
    return {key: target for key, (target, _) in done.items()}


def format_of_name(name: str | Path) -> str | None:
    """The format a file name's extension names (``.csv``, ``.pq``, ``.ndjson`` …), or None."""
    return _EXTENSIONS.get(Path(name).suffix.lower())


# --- opening an input ---------------------------------------------------------------------


def _detect_format(path: Path, head: bytes, given: str | None) -> str:
    if given:
        return given
    ext = format_of_name(path)
    if ext:
        return ext
    if head.startswith(b"PAR1"):
        return "parquet"
    if head.lstrip()[:1] == b"{":
        return "jsonl"
    return "csv"


def _sniff_separator(first_line: str) -> str:
    """The delimiter of a header line: the candidate seen most often outside quotes."""
    counts: Counter[str] = Counter()
    quoted = False
    for ch in first_line:
        if ch == '"':
            quoted = not quoted
        elif not quoted and ch in ",\t;|":
            counts[ch] += 1
    return counts.most_common(1)[0][0] if counts else ","


def _line_of(data_path: Path, byte_offset: int) -> int:
    with open(data_path, "rb") as fh:
        return fh.read(byte_offset).count(b"\n") + 1


def _head(path: Path) -> bytes:
    with open(path, "rb") as fh:
        return fh.read(_HEAD)


def _transcode(src: Path, encoding: str, name: str) -> Path:
    """Copy a file in another encoding to a temporary UTF-8 file, streaming."""
    out = _tempfile(".csv")
    decoder = codecs.getincrementaldecoder(encoding)(errors="strict")
    done = 0
    try:
        with open(src, "rb") as fin, open(out, "w", encoding="utf-8", newline="") as fout:
            while chunk := fin.read(1 << 20):
                try:
                    fout.write(decoder.decode(chunk))
                except UnicodeDecodeError as exc:
                    line = _line_of(src, done + exc.start)
                    raise InputError(
                        f"{name} is not valid {encoding} text (line {line})",
                        hint="pass the file's encoding with `encoding`, for example "
                        "`encoding` cp1252 or `encoding` utf-16",
                    ) from exc
                done += len(chunk)
            fout.write(decoder.decode(b"", final=True))
    except BaseException:
        out.unlink(missing_ok=True)
        raise
    return out


def _unix_lines(src: Path, quotes: bool) -> Path:
    """Copy a file whose lines end in a bare carriage return (old Mac files) with line feeds
    instead. With ``quotes``, carriage returns inside quoted fields stay, so every value keeps
    its content; invalid bytes pass through unchanged, for the UTF-8 check to report."""
    out = _tempfile(".csv")
    inside = False
    try:
        with (
            open(src, encoding="utf-8", errors="surrogateescape", newline="") as fin,
            open(out, "w", encoding="utf-8", errors="surrogateescape", newline="") as fout,
        ):
            while chunk := fin.read(1 << 20):
                if not quotes:
                    fout.write(chunk.replace("\r", "\n"))
                    continue
                pieces = []
                for i, part in enumerate(chunk.split('"')):
                    if i:
                        inside = not inside
                        pieces.append('"')
                    pieces.append(part if inside else part.replace("\r", "\n"))
                fout.write("".join(pieces))
    except BaseException:
        out.unlink(missing_ok=True)
        raise
    return out


def _first_invalid_utf8_line(path: Path) -> int | None:
    with open(path, "rb") as fh:
        for n, line in enumerate(fh, start=1):
            try:
                line.decode("utf-8")
            except UnicodeDecodeError:
                return n
    return None


def _locate(input: str | Path) -> tuple[str, Path, list[Path]]:
    """The input's name for messages and a path to read (standard input is copied first)."""
    name = str(input)
    if name == "-":
        path = _tempfile(".in")
        try:
            with open(path, "wb") as fh:
                shutil.copyfileobj(sys.stdin.buffer, fh, 1 << 20)
        except BaseException:
            path.unlink(missing_ok=True)
            raise
        return "standard input", path, [path]
    path = Path(input)
    if not path.exists():
        raise InputError(f"input file {path} does not exist", hint="check the path and try again")
    if path.is_dir():
        raise InputError(f"{path} is a folder, not a file", hint="pass the file inside it")
    return name, path, []


def _refuse_other_formats(name: str, head: bytes, fmt: str) -> None:
    for magic, what in _MAGIC.items():
        if head.startswith(magic) and fmt != "parquet":
            raise InputError(
                f"{name} looks like {what}, not a table geonorm reads",
                hint="export it as CSV, or pass a CSV, TSV, Parquet or JSON Lines file",
            )
    if fmt == "parquet" and not head.startswith(b"PAR1"):
        raise InputError(
            f"{name} is not a Parquet file",
            hint="pass `format` to say what it is, or check the file",
        )


def _encoding_of(head: bytes, encoding: str) -> str:
    """The encoding to read with, normalised ("utf-8" needs no copy)."""
    enc = encoding.lower().replace("_", "-")
    if enc in ("utf-8", "utf8", "utf-8-sig"):
        # A UTF-16 byte order mark says what the file is.
        return "utf-16" if head[:2] in (b"\xff\xfe", b"\xfe\xff") else "utf-8"
    try:
        codecs.lookup(enc)
    except LookupError as exc:
        raise InputError(
            f"unknown encoding {encoding!r}",
            hint="use a name Python knows, such as utf-8, latin-1, cp1252 or utf-16",
        ) from exc
    return enc


def _refuse_binary(name: str, head: bytes, utf8: bool) -> None:
    controls = len(head) - len(head.translate(None, _CONTROL))
    if head.count(b"\x00") > len(head) // 10 or (controls >= 4 and controls * 20 > len(head)):
        raise InputError(
            f"{name} looks like a binary file, not text",
            hint="pass a CSV, TSV, Parquet or JSON Lines file, or give its `encoding`",
        )
    if utf8:
        try:
            codecs.getincrementaldecoder("utf-8")().decode(head, final=False)
        except UnicodeDecodeError as exc:
            line = head[: exc.start].count(b"\n") + 1
            raise InputError(
                f"{name} is not valid UTF-8 text (line {line})",
                hint="pass the file's encoding with `encoding`, for example `encoding` cp1252",
            ) from exc


def _cr_only(head: bytes) -> bool:
    """Whether lines end in a bare carriage return (a full head may end inside a CR LF)."""
    probe = head if len(head) < _HEAD else head.rstrip(b"\r")
    return b"\n" not in head and b"\r" in probe


def _prepare(
    name: str,
    path: Path,
    temp: list[Path],
    encoding: str,
    separator: str | None,
    input_format: str | None,
) -> Source:
    head = _head(path)
    if not head:
        raise InputError(f"{name} is empty", hint="pass a file with a header line and rows")
    fmt = _detect_format(path, head, input_format)
    _refuse_other_formats(name, head, fmt)
    if fmt == "parquet":
        return Source(name, path, fmt, temp=temp)
    enc = _encoding_of(head, encoding)
    if enc != "utf-8":
        path = _transcode(path, enc, name)
        temp.append(path)
        head = _head(path)
    _refuse_binary(name, head, utf8=enc == "utf-8")
    if _cr_only(head):
        path = _unix_lines(path, quotes=fmt != "jsonl")
        temp.append(path)
        head = _head(path)
    if head.startswith(codecs.BOM_UTF8):
        head = head[3:]
    sep = separator or (
        "\t" if fmt == "tsv" else _sniff_separator(head.split(b"\n")[0].decode("utf-8", "replace"))
    )
    return Source(name, path, fmt, sep, temp)


def open_source(
    input: str | Path,
    *,
    encoding: str = "utf-8",
    separator: str | None = None,
    input_format: str | None = None,
) -> Source:
    """Check the input and make it a readable UTF-8 file with line feeds (copying if needed)."""
    _remove_stale(Path(tempfile.gettempdir()), _WORK)
    name, path, temp = _locate(input)
    try:
        return _prepare(name, path, temp, encoding, separator, input_format)
    except BaseException:
        for p in temp:
            p.unlink(missing_ok=True)
        raise


def output_format(output: str, given: str | None, source: Source) -> str:
    if given:
        if given not in FORMATS:
            raise InputError(
                f"unknown output format {given!r}", hint=f"use one of: {', '.join(FORMATS)}"
            )
        return given
    if output == "-":
        return source.format
    fmt = format_of_name(output)
    if fmt is None:
        raise InputError(
            f"cannot tell the output format from {output!r}",
            hint="end the name with .csv, .tsv, .parquet or .jsonl, or pass `format`",
        )
    return fmt


# --- reading ------------------------------------------------------------------------------


def _scan(source: Source) -> pl.LazyFrame:
    if source.frame is not None:
        return source.frame.lazy()
    if source.format == "parquet":
        return pl.scan_parquet(source.path, glob=False)
    return pl.scan_csv(
        source.path,
        glob=False,
        separator=source.separator,
        infer_schema=False,
        encoding="utf8",
        quote_char='"',
        raise_if_empty=True,
    )


def lazy_table(source: Source) -> pl.LazyFrame:
    """The whole table, lazily (JSON Lines is read at once: polars infers its types)."""
    if source.format == "jsonl":
        return pl.read_ndjson(source.path, infer_schema_length=None).lazy()
    return _scan(source)


def read_columns(source: Source, columns: list[str]) -> pl.DataFrame:
    """Some columns of a table as text, missing values as empty strings."""
    try:
        return (
            lazy_table(source)
            .select([pl.col(c).cast(pl.String).fill_null("") for c in dict.fromkeys(columns)])
            .collect()
        )
    except _POLARS_ERRORS as exc:
        raise _polars_error(source, exc) from exc


def _quote_problem(source: Source) -> tuple[int, str] | None:
    """The first misplaced double quote of a CSV file: its line and what is wrong."""
    sep, line, opened = source.separator, 1, 0
    state = "start"  # start of a field, "plain" field, "quoted" field, "closing" quote seen
    with open(source.path, encoding="utf-8-sig", errors="replace", newline="") as fh:
        for text in fh:  # one line, with its line break
            if state != "quoted" and '"' not in text:
                line += text.endswith("\n")  # a line without quotes: nothing to check
                continue
            for ch in text:
                if state == "quoted":
                    line += ch == "\n"
                    state = "closing" if ch == '"' else state
                    continue
                if state == "closing" and ch == '"':
                    state = "quoted"  # a doubled quote inside a quoted field
                    continue
                if state == "closing" and ch not in (sep, "\n", "\r"):
                    return line, "has text after the closing quote of a field"
                if ch == '"' and state == "plain":
                    return line, "has a quote inside a field that does not start with one"
                if ch == '"':
                    state, opened = "quoted", line
                elif ch in (sep, "\n", "\r"):
                    state = "start"
                    line += ch == "\n"
                else:
                    state = "plain"
    return (opened, "opens a quote that is never closed") if state == "quoted" else None


_READ_HINTS = {
    "csv": "check the file's format, separator (`separator`) and encoding (`encoding`)",
    "tsv": "check the file's format, separator (`separator`) and encoding (`encoding`)",
    "parquet": "check the file is a whole Parquet file, or pass `format` to say what it is",
    "jsonl": "each line of a JSON Lines file must be one JSON object",
}


def _polars_error(source: Source, exc: BaseException) -> InputError:
    text = str(exc)
    if isinstance(exc, UnicodeDecodeError) or "utf-8" in text.lower() or "utf8" in text.lower():
        line = _first_invalid_utf8_line(source.path)
        where = f" (line {line})" if line else ""
        return InputError(
            f"{source.name} is not valid UTF-8 text{where}",
            hint="pass the file's encoding with `encoding`, for example `encoding` cp1252",
        )
    if "more fields" in text or "ragged" in text:
        return InputError(
            f"{source.name} has rows with more fields than its header",
            hint="fix those rows, or pass `bad_lines` FILE to set them aside and go on",
        )
    if source.format in ("csv", "tsv"):
        problem = _quote_problem(source)
        if problem:
            return InputError(
                f"{source.name} line {problem[0]} {problem[1]}",
                hint="put a field that holds quotes, separators or line breaks in double quotes, "
                'and double each quote inside it (""); or check `separator`',
            )
    first = printable(text.strip().splitlines()[0]) if text.strip() else type(exc).__name__
    return InputError(
        f"cannot read {source.name} as {source.format.upper()} ({first})",
        hint=_READ_HINTS.get(source.format, _READ_HINTS["csv"]),
    )


def _refuse_duplicates(
    name: str, names: Sequence[str], where: str = "", what: str = "column"
) -> None:
    twice = [n for n, count in Counter(names).items() if count > 1]
    if twice:
        raise InputError(
            f"{name}{where} has more than one {what} named {', '.join(map(quoted, twice))}",
            hint=f"rename the {what}s so that each name is used once",
        )


def _csv_header(source: Source) -> list[str]:
    """The header record as Python's csv module reads it (polars renames duplicates)."""
    with open(source.path, encoding="utf-8-sig", errors="replace", newline="") as fh:
        text = fh.read(1 << 20)
    return next(csv.reader(io.StringIO(text), delimiter=source.separator), [])


def read_header(source: Source) -> list[str]:
    """The column names; refuses a name used twice. JSON Lines: the keys of every record, in
    the order first seen."""
    if source.columns is None:
        if source.format == "jsonl":
            keys: dict[str, None] = {}
            for _, fields in _jsonl_records(source):
                keys.update((key, None) for key, _ in fields)
            source.columns = list(keys)
        else:
            if source.format in ("csv", "tsv"):
                _refuse_duplicates(source.name, _csv_header(source))
            source.columns = _schema_names(source)
    return list(source.columns)


def _schema_names(source: Source) -> list[str]:
    try:
        return list(_scan(source).collect_schema().names())
    except pl.exceptions.NoDataError as exc:
        raise InputError(
            f"{source.name} is empty", hint="pass a file with a header line and rows"
        ) from exc
    except _POLARS_ERRORS as exc:
        raise _polars_error(source, exc) from exc


# --- JSON Lines records -------------------------------------------------------------------


class _Pairs(list[tuple[str, Any]]):
    """A JSON object's members in their order, as (name, value) pairs (so a name given twice is
    seen)."""


class _Num(str):
    """A JSON number as written (``1e5`` stays ``1e5``)."""


# Objects keep their members' order and numbers their text; as fast as a plain json.loads.
_DECODER = json.JSONDecoder(
    object_pairs_hook=_Pairs, parse_float=_Num, parse_int=_Num, parse_constant=_Num
)


def _record(name: str, lineno: int, line: str) -> _Pairs:
    """One JSON Lines record, checked: an object, no key twice, no unpaired surrogate."""
    hint = "each line of a JSON Lines file must be one JSON object"
    try:
        members = _DECODER.decode(line)
    except json.JSONDecodeError as exc:
        raise InputError(f"{name} line {lineno} is not valid JSON ({exc.msg})", hint=hint) from exc
    if not isinstance(members, _Pairs):
        raise InputError(f"{name} line {lineno} is not a JSON object", hint=hint)
    if len({key for key, _ in members}) != len(members):
        _refuse_duplicates(name, [key for key, _ in members], f" line {lineno}", "key")
    if _SURROGATE.search(line):
        for key, value in members:
            try:
                json.dumps([key, value], ensure_ascii=False).encode("utf-8")
            except UnicodeEncodeError:
                raise InputError(
                    f"{name} line {lineno} holds an unpaired surrogate escape (\\ud800 to "
                    f"\\udfff) in the column {quoted(key)}: it stands for no character",
                    hint="fix that value: such escapes are only valid in pairs that make "
                    "one character",
                ) from None
    return members


def _jsonl_lines(source: Source) -> Iterator[tuple[int, str, _Pairs | None]]:
    """Every line with its record (None for a blank line)."""
    try:
        with open(source.path, encoding="utf-8-sig", errors="strict") as fh:
            for lineno, line in enumerate(fh, start=1):
                members = _record(source.name, lineno, line) if line.strip() else None
                yield lineno, line, members
    except UnicodeDecodeError as exc:
        bad = _first_invalid_utf8_line(source.path)
        raise InputError(
            f"{source.name} is not valid UTF-8 text" + (f" (line {bad})" if bad else ""),
            hint="pass the file's encoding with `encoding`, for example `encoding` cp1252",
        ) from exc


def _jsonl_records(source: Source) -> Iterator[tuple[int, _Pairs]]:
    for lineno, _, members in _jsonl_lines(source):
        if members is not None:
            yield lineno, members


def _json_text(value: Any) -> str:
    """A parsed JSON value as JSON text: members in their order, numbers as written."""
    if isinstance(value, _Pairs):
        inner = ",".join(f"{json.dumps(k, ensure_ascii=False)}:{_json_text(v)}" for k, v in value)
        return "{" + inner + "}"
    if isinstance(value, list):
        return "[" + ",".join(_json_text(v) for v in value) + "]"
    if isinstance(value, _Num):
        return str(value)
    return json.dumps(value, ensure_ascii=False)


def _cell_text(value: Any) -> str | None:
    """A JSON value as text: a string as itself, null as missing, a number as written, anything
    else as its JSON text."""
    if value is None:
        return None
    if isinstance(value, str) and not isinstance(value, _Num):
        return value
    return _json_text(value)


def _location_of(members: _Pairs, column: str) -> tuple[str | None, bool]:
    """A record's location text, and whether it held a list or object (not a location: such a
    value counts as missing)."""
    for key, value in members:
        if key == column:
            if isinstance(value, list):  # an array, or an object's members
                return None, True
            return _cell_text(value), False
    return None, False


def _plain(value: Any) -> Any:
    """A parsed JSON value as plain Python values (objects as dicts, numbers as numbers)."""
    if isinstance(value, _Pairs):
        return {k: _plain(v) for k, v in value}
    if isinstance(value, list):
        return [_plain(v) for v in value]
    if isinstance(value, _Num):
        return float(value) if any(c in value for c in ".eEIN") else int(value)
    return value


# --- counting -----------------------------------------------------------------------------


def _refuse_nested_location(source: Source, column: str) -> None:
    try:
        dtype = _scan(source).collect_schema()[column]
    except _POLARS_ERRORS as exc:
        raise _polars_error(source, exc) from exc
    what = {pl.List: "lists", pl.Array: "lists", pl.Struct: "structs", pl.Binary: "binary data"}
    kind = what.get(dtype.base_type())
    if kind:
        raise InputError(
            f"the column {quoted(column)} of {source.name} holds {kind}, not text",
            hint="pass the column that holds the location text with `column`",
        )


def count_values(source: Source, column: str) -> tuple[dict[str | None, int], int]:
    """Distinct values of ``column`` with their row counts, and the row count."""
    if source.format == "jsonl":
        counts: Counter[str | None] = Counter()
        nested = 0
        for _, members in _jsonl_records(source):
            text, is_nested = _location_of(members, column)
            counts[text] += 1
            nested += is_nested
        if nested:
            source.notes.append(
                f"{nested:,} row(s) hold a list or an object in the column {quoted(column)}, "
                "not text: they count as empty"
            )
        return dict(counts), sum(counts.values())
    if source.format == "parquet":
        _refuse_nested_location(source, column)
    try:
        lf = _scan(source).select(pl.col(column).cast(pl.String))
        with _bounded_reads(source.frame is None):
            df = lf.group_by(column).len().collect(engine="streaming")
        values = df.get_column(column).to_list()
    except _POLARS_ERRORS as exc:
        raise _polars_error(source, exc) from exc
    lens = df.get_column("len").to_list()
    return dict(zip(values, lens, strict=False)), int(sum(lens))


def hold(source: Source, *, quiet: bool = False) -> None:
    """Read a small CSV or TSV table into memory once (``IN_MEMORY_BYTES``): the checks and
    both passes then read it from there. (Not for a Parquet output: how the streaming
    engine cuts a file into row groups follows how it read the input, and the bytes
    written must not depend on where the input was read from.) ``quiet``: a table that
    cannot be read whole stays on disk, for the checks to name its problem."""
    if (
        source.frame is not None
        or source.format not in ("csv", "tsv")
        or source.path.stat().st_size > IN_MEMORY_BYTES
    ):
        return
    try:
        source.frame = _scan(source).collect()
    except _POLARS_ERRORS as exc:
        if not quiet:
            raise _polars_error(source, exc) from exc


def distinct_values(source: Source, column: str) -> tuple[pl.DataFrame, int]:
    """Distinct values of ``column`` (``value``, missing as null) with their row counts
    (``rows``), and the row count."""
    if source.format == "jsonl":
        counts, total = count_values(source, column)
        frame = pl.DataFrame(
            {"value": list(counts), "rows": list(counts.values())},
            schema={"value": pl.String, "rows": pl.Int64},
        )
        return frame, total
    if source.format == "parquet":
        _refuse_nested_location(source, column)
    held = source.frame
    if held is not None and held.schema[column] == pl.String:
        return _distinct_held(source, held, column)
    try:
        lf = _scan(source).select(pl.col(column).cast(pl.String).alias("value"))
        counted = lf.group_by("value").agg(pl.len().cast(pl.Int64).alias("rows"))
        if source.frame is not None:
            frame = counted.collect(engine="in-memory")
        else:
            with _bounded_reads():
                frame = counted.collect(engine="streaming")
    except _POLARS_ERRORS as exc:
        raise _polars_error(source, exc) from exc
    return frame, int(frame.get_column("rows").sum())


def _distinct_held(source: Source, frame: pl.DataFrame, column: str) -> tuple[pl.DataFrame, int]:
    """``distinct_values`` of a held table's text column, in one pass that also keeps each
    row's position among them (``Source.positions``)."""
    try:
        groups = (
            pl.DataFrame([frame.get_column(column).alias("value")])
            .with_row_index("row")
            .group_by("value")
            .agg(pl.col("row"))
            .with_row_index("at")
        )
        taken = groups.select("at", "row").explode("row")
        at = pl.zeros(frame.height, dtype=taken.schema["at"], eager=True)
        at = at.scatter(taken.get_column("row"), taken.get_column("at"))
    except _POLARS_ERRORS as exc:
        raise _polars_error(source, exc) from exc
    counted = groups.select("value", pl.col("row").list.len().cast(pl.Int64).alias("rows"))
    source.positions[column] = (counted.get_column("value"), at)
    return counted, frame.height


def find_ragged(source: Source, expected: int) -> list[int]:
    """Line numbers of CSV records whose field count differs from the header's.

    A fast screen over raw lines (quoted text removed, separators counted) finds
    candidates; only if there are any does an exact CSV parse confirm them.
    """
    if source.format not in ("csv", "tsv"):
        return []
    held = source.frame
    if (
        held is not None
        and held.width == expected
        and not held.get_column(held.columns[-1]).has_nulls()
    ):
        # Read whole: a longer record fails the read, and a shorter one leaves its last
        # field missing. With no missing last field, every record has the header's count.
        return []
    try:
        lines = pl.scan_csv(
            source.path,
            glob=False,
            has_header=False,
            separator="\x1f",
            quote_char=None,
            new_columns=["line"],
            infer_schema=False,
            encoding="utf8",
        )
        screen = (
            lines.with_row_index("n")
            .filter(
                pl.col("line")
                .str.replace_all('"[^"]*"', "")
                .str.count_matches(source.separator, literal=True)
                != expected - 1
            )
            .select("n")
            .head(1)
        )
        with _bounded_reads():
            suspects = screen.collect(engine="streaming")
    except _POLARS_ERRORS:
        suspects = None  # a line with \x1f in it, or similar: check exactly
    if suspects is not None and suspects.height == 0:
        return []
    bad = []
    try:
        with open(source.path, encoding="utf-8-sig", newline="") as fh:
            reader = csv.reader(fh, delimiter=source.separator)
            next(reader, None)
            start = reader.line_num
            for row in reader:
                if len(row) != expected and row:
                    bad.append(start + 1)
                start = reader.line_num
    except (UnicodeDecodeError, csv.Error) as exc:
        raise _polars_error(source, exc) from exc
    return bad


def set_aside(source: Source, expected: int, bad: Target) -> tuple[Source, int]:
    """Write ragged records to ``bad`` (with their line numbers), the rest to a new source."""
    good = _tempfile(".csv")
    n_good = n_bad = 0
    try:
        with writing(bad) as bad_tmp:
            with (
                open(source.path, encoding="utf-8-sig", newline="") as fh,
                open(good, "w", encoding="utf-8", newline="") as fg,
                open(bad_tmp, "w", encoding="utf-8", newline="") as fb,
            ):
                reader = csv.reader(fh, delimiter=source.separator)
                # Quote every field: Python's writer would leave a lone \r unquoted.
                wg = csv.writer(
                    fg, delimiter=source.separator, lineterminator="\n", quoting=csv.QUOTE_ALL
                )
                wb = csv.writer(fb, lineterminator="\n", quoting=csv.QUOTE_ALL)
                wg.writerow(next(reader, []))
                wb.writerow(["line", "fields", "record"])
                start = reader.line_num
                for row in reader:
                    if len(row) == expected:
                        wg.writerow(row)
                        n_good += 1
                    elif row:
                        n_bad += 1
                        wb.writerow([start + 1, len(row), source.separator.join(row)])
                    start = reader.line_num
            kept = Source(source.name, good, source.format, source.separator)
            kept.columns = source.columns
            _check_rows(_count_rows(good, "csv", source.separator), n_good, bad.given)
    except BaseException:
        good.unlink(missing_ok=True)
        raise
    kept.temp = [*source.temp, good]
    return kept, n_bad


# --- writing ------------------------------------------------------------------------------


def _check_rows(written: int, rows: int, what: str) -> None:
    """The row-count invariant of every write: as many rows out as in."""
    if written != rows:
        raise GeonormError(
            f"{written:,} rows were written for {rows:,} rows read: stopped, {what} was not "
            "written",
            hint="nothing was replaced; this is a fault in geonorm, please report it with the "
            "command and the first lines of the file",
        )


def _count_rows(path: Path, fmt: str, separator: str = ",") -> int:
    if fmt == "parquet":
        return int(pl.scan_parquet(path, glob=False).select(pl.len()).collect().item())
    if fmt == "jsonl":
        with open(path, "rb") as fh:
            return sum(1 for line in fh if line.strip())
    lf = pl.scan_csv(
        path,
        glob=False,
        separator="\t" if fmt == "tsv" else separator,
        infer_schema=False,
        quote_char='"',
        encoding="utf8",
        raise_if_empty=False,
    )
    with _bounded_reads(path.stat().st_size > IN_MEMORY_BYTES):
        return int(lf.select(pl.len()).collect().item())


def check_writable_as(source: Source, out_fmt: str) -> None:
    """Refuse list, struct and binary columns (Parquet) for a text output, which cannot hold
    them."""
    if source.format != "parquet" or out_fmt not in ("csv", "tsv"):
        return
    try:
        schema = _scan(source).collect_schema()
    except _POLARS_ERRORS as exc:
        raise _polars_error(source, exc) from exc
    nested = [n for n, t in schema.items() if t.is_nested() or t == pl.Binary]
    if nested:
        raise InputError(
            f"{source.name} has columns of lists, structs or binary data "
            f"({', '.join(map(quoted, nested))}), which {out_fmt.upper()} cannot hold",
            hint="write Parquet or JSON Lines instead (`format` parquet)",
        )


def write_output(
    source: Source,
    column: str,
    geo: pl.DataFrame,
    geo_names: list[str],
    out_fmt: str,
    target: Target,
    rows: int,
) -> None:
    """Write every input row with the geo columns appended to ``target``, through a partial file
    put in place at the end; stop, replacing nothing, unless it holds exactly ``rows`` rows.

    ``geo`` has one row per distinct location value: ``value`` (missing as null) and the
    ``GEO_FIELDS`` with their types (``geo_table`` makes it from ``GeoRow`` values)."""
    check_writable_as(source, out_fmt)
    with writing(target) as tmp:
        if source.format == "jsonl":
            _write_from_jsonl(source, column, _mapping_of(geo), geo_names, out_fmt, tmp)
        else:
            _write_polars(source, column, geo, geo_names, out_fmt, tmp)
        _check_rows(_count_rows(tmp, out_fmt), rows, target.given)


def geo_table(mapping: Mapping[str | None, GeoRow]) -> pl.DataFrame:
    """The table ``write_output`` takes, from each distinct value's ``GeoRow``."""
    frame = _geo_frame(mapping, list(GEO_FIELDS), typed=True)
    return frame.insert_column(0, pl.Series("value", list(mapping), dtype=pl.String))


def _mapping_of(geo: pl.DataFrame) -> dict[str | None, GeoRow]:
    rows = (GeoRow(*r) for r in geo.select(GEO_FIELDS).iter_rows())
    return dict(zip(geo.get_column("value").to_list(), rows, strict=True))


def per_distinct(values: pl.Series, fn: Callable[[float], Any], dtype: Any) -> pl.Series:
    """``fn`` of each number of ``values`` (missing stays missing), called once per distinct
    number. Numbers are told apart by their shortest text, which names one float exactly
    (so -0.0 and 0.0 stay apart)."""
    texts = values.cast(pl.String)
    distinct = texts.drop_nulls().unique()
    done = [fn(float(t)) for t in distinct.to_list()]
    return texts.replace_strict(distinct, done, default=None, return_dtype=dtype).alias(values.name)


# Decimals of the numbers in a text format (as ``as_text_row`` writes them).
_DECIMALS = {"lat": 5, "lon": 5, "confidence": 3}


def _text_column(values: pl.Series, decimals: int) -> pl.Series:
    """Numbers as text with fixed ``decimals``, missing as empty (``as_text_row``'s way).

    A number whose shortest text has at most ``decimals`` decimals (and that is below
    1e9, so one unit in its last place is far below half of the last decimal) is that
    text padded with zeros, exactly what Python's fixed-point format writes; the rest go
    through Python's format, once per distinct number.
    """
    t = pl.col("t")
    digits = t.str.len_bytes() - t.str.find(".", literal=True) - 1
    frame = pl.DataFrame({"x": values.cast(pl.Float64)}).with_columns(t=pl.col("x").cast(pl.String))
    frame = frame.with_columns(
        shown=(
            t.str.contains(r"^-?[0-9]+\.[0-9]+$") & (pl.col("x").abs() < 1e9) & (digits <= decimals)
        ).fill_null(False)
    )
    rest = frame.filter(~pl.col("shown") & t.is_not_null()).get_column("t").unique()
    done = [f"{float(x):.{decimals}f}" for x in rest.to_list()]
    padded = pl.concat_str([t, pl.lit("0" * decimals).str.slice(0, decimals - digits)])
    written = (
        pl.when(pl.col("shown"))
        .then(padded)
        .otherwise(t.replace_strict(rest, done, default=None, return_dtype=pl.String))
    )
    return frame.select(written.fill_null("").alias(values.name)).to_series()


def as_text_row(geo: GeoRow) -> list[str]:
    """Geo values for a text format: numbers with fixed decimals, missing as empty."""
    return [
        geo.country,
        geo.subdivision,
        geo.city,
        "" if geo.lat is None else f"{geo.lat:.5f}",
        "" if geo.lon is None else f"{geo.lon:.5f}",
        "" if geo.confidence is None else f"{geo.confidence:.3f}",
        geo.reason,
        geo.status,
    ]


def _join_key(value: str | None) -> str:
    """The join key of a location value: no value and any text, even "\\x00", differ."""
    return "" if value is None else "=" + value


def _geo_frame(
    mapping: Mapping[str | None, GeoRow], geo_names: list[str], typed: bool
) -> pl.DataFrame:
    """The geo columns of each distinct value, in ``mapping``'s order."""
    rows: list[Sequence[object]] = (
        list(mapping.values()) if typed else [as_text_row(g) for g in mapping.values()]
    )
    data: dict[str, list[object]] = {}
    schema: dict[str, pl.DataType] = {}
    for i, (name, geo_field) in enumerate(zip(geo_names, GEO_FIELDS, strict=True)):
        data[name] = [r[i] for r in rows]
        schema[name] = pl.Float64() if typed and geo_field in NUMERIC_FIELDS else pl.String()
    return pl.DataFrame(data, schema=schema)


def _join_table(
    geo: pl.DataFrame, geo_names: list[str], typed: bool, key: pl.Series
) -> pl.DataFrame:
    """The geo columns, named ``geo_names``, beside the join ``key`` of each distinct value."""
    columns = [key]
    for name, geo_field in zip(geo_names, GEO_FIELDS, strict=True):
        column = geo.get_column(geo_field)
        if not typed and geo_field in _DECIMALS:
            column = _text_column(column, _DECIMALS[geo_field])
        columns.append(column.alias(name))
    return pl.DataFrame(columns)


def _write_polars(
    source: Source,
    column: str,
    geo: pl.DataFrame,
    geo_names: list[str],
    out_fmt: str,
    tmp: Path,
) -> None:
    lf = _scan(source)
    typed = out_fmt in ("parquet", "jsonl")
    try:
        schema = lf.collect_schema()
        values = geo.get_column("value")
        if schema[column] == pl.String:  # joined on the text itself: missing meets missing
            table = _join_table(geo, geo_names, typed, values.alias(column))
            if not typed and _write_held(source, column, table, out_fmt, tmp):
                return
            joined = lf.join(
                table.lazy(), on=column, how="left", maintain_order="left", nulls_equal=True
            )
        else:  # joined on its text: "=" and the text, missing as "" (``_join_key``)
            key = "__geo_key"
            while key in schema:
                key += "_"
            keys = pl.Series(key, [_join_key(v) for v in values.to_list()], dtype=pl.String)
            table = _join_table(geo, geo_names, typed, keys)
            value = pl.concat_str([pl.lit("="), pl.col(column).cast(pl.String)]).fill_null("")
            joined = (
                lf.with_columns(value.alias(key))
                .join(table.lazy(), on=key, how="left", maintain_order="left")
                .drop(key)
            )
        # Parquet keeps polars' own chunks: its row groups follow how the input was read.
        with _bounded_reads(source.frame is None and out_fmt != "parquet"):
            if out_fmt == "parquet":
                joined.sink_parquet(tmp, maintain_order=True)
            elif out_fmt == "jsonl":
                joined.sink_ndjson(tmp, maintain_order=True)
            else:
                sep = "\t" if out_fmt == "tsv" else ","
                joined.sink_csv(tmp, separator=sep, maintain_order=True)
    except _POLARS_ERRORS as exc:
        raise _polars_error(source, exc) from exc


def _write_held(source: Source, column: str, table: pl.DataFrame, out_fmt: str, tmp: Path) -> bool:
    """CSV or TSV from a table held in memory (``hold``) whose distinct values
    ``distinct_values`` counted, the bytes the streaming join writes: each row's geo columns
    are taken from ``table`` (``_join_table``'s, one row per text of ``column``) by the
    row's position among those values, ``_WRITE_ROWS`` rows at a time. False, and nothing
    written, for a table not held or a ``table`` not one row per value (the join then
    repeats rows, for the row count to catch)."""
    if source.frame is None or column not in source.positions:
        return False
    values, at = source.positions[column]
    table = pl.DataFrame([values.alias(column)]).join(
        table, on=column, how="left", maintain_order="left", nulls_equal=True
    )
    if table.height != values.len():
        return False
    geo, frame, sep = table.drop(column), source.frame, "\t" if out_fmt == "tsv" else ","
    with open(tmp, "wb") as fh:  # a slice at a time: the geo columns of a slice only
        for start in range(0, max(frame.height, 1), _WRITE_ROWS):
            part = frame.slice(start, _WRITE_ROWS)
            part = part.hstack(geo[at.slice(start, _WRITE_ROWS)].get_columns())
            part.write_csv(fh, separator=sep, include_header=not start)
    return True


def _write_from_jsonl(
    source: Source,
    column: str,
    mapping: Mapping[str | None, GeoRow],
    geo_names: list[str],
    out_fmt: str,
    tmp: Path,
) -> None:
    if out_fmt == "jsonl":
        _jsonl_to_jsonl(source, column, mapping, geo_names, tmp)
    elif out_fmt == "parquet":
        _jsonl_to_parquet(source, column, mapping, geo_names, tmp)
    else:
        _jsonl_to_text(source, column, mapping, geo_names, "\t" if out_fmt == "tsv" else ",", tmp)


def _jsonl_to_jsonl(
    source: Source,
    column: str,
    mapping: Mapping[str | None, GeoRow],
    geo_names: list[str],
    tmp: Path,
) -> None:
    """Each record's text is kept byte for byte, geo keys appended."""
    with open(tmp, "w", encoding="utf-8", newline="") as fout:
        for _, line, members in _jsonl_lines(source):
            if members is None:
                fout.write(line)
                continue
            geo = mapping[_location_of(members, column)[0]]
            extra = ", ".join(
                f"{json.dumps(n)}: {json.dumps(v, ensure_ascii=False)}"
                for n, v in zip(geo_names, geo, strict=False)
            )
            inner = line.rstrip()[:-1].rstrip()
            fout.write(f"{inner}{', ' if members else ''}{extra}}}\n")


def _csv_cell(value: str | None, sep: str) -> str:
    """A CSV field written the way polars writes one: missing as nothing, empty text as ""."""
    if value is None:
        return ""
    if value == "" or any(c in value for c in (sep, '"', "\n", "\r")):
        return '"' + value.replace('"', '""') + '"'
    return value


def _jsonl_to_text(
    source: Source,
    column: str,
    mapping: Mapping[str | None, GeoRow],
    geo_names: list[str],
    sep: str,
    tmp: Path,
) -> None:
    """CSV or TSV from JSON Lines: text as itself, null or absent as missing, numbers,
    booleans, lists and objects as written in the record."""
    header = read_header(source)
    with open(tmp, "w", encoding="utf-8", newline="") as fout:
        fout.write(sep.join(_csv_cell(h, sep) for h in [*header, *geo_names]) + "\n")
        for _, members in _jsonl_records(source):
            cells = {key: _cell_text(value) for key, value in members}
            geo = as_text_row(mapping[_location_of(members, column)[0]])
            row = [*(cells.get(h) for h in header), *geo]
            fout.write(sep.join(_csv_cell(c, sep) for c in row) + "\n")


def _jsonl_frame(source: Source) -> pl.DataFrame:
    """The records as a typed table: polars infers the types; where it cannot (a column mixing
    lists and objects …), such a column holds each value's text as written."""
    try:
        return pl.read_ndjson(source.path, infer_schema_length=None)
    except _POLARS_ERRORS:
        pass
    header = read_header(source)
    values: dict[str, list[Any]] = {h: [] for h in header}
    texts: dict[str, list[str | None]] = {h: [] for h in header}
    for _, members in _jsonl_records(source):
        got = dict(members)
        for h in header:
            value = got.get(h)
            values[h].append(_plain(value))
            texts[h].append(_cell_text(value))
    columns = []
    for h in header:
        try:
            columns.append(pl.Series(h, values[h], strict=True))
        except _SERIES_ERRORS:
            columns.append(pl.Series(h, texts[h], dtype=pl.String))
    return pl.DataFrame(columns)


def _jsonl_to_parquet(
    source: Source,
    column: str,
    mapping: Mapping[str | None, GeoRow],
    geo_names: list[str],
    tmp: Path,
) -> None:
    """Parquet from JSON Lines: the geo columns are attached by row position, from each
    record's own location text."""
    index = {value: i for i, value in enumerate(mapping)}
    ids = [index[_location_of(m, column)[0]] for _, m in _jsonl_records(source)]
    frame = _jsonl_frame(source)
    _check_rows(frame.height, len(ids), "the output")
    geo = _geo_frame(mapping, geo_names, typed=True)
    taken = geo.select(pl.all().gather(pl.Series(ids, dtype=pl.UInt32)))
    try:
        frame.hstack(taken.get_columns()).write_parquet(tmp)
    except _POLARS_ERRORS as exc:
        raise _polars_error(source, exc) from exc
