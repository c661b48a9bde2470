"""Reading and writing the tables geonorm cleans: CSV, TSV, Parquet, JSON Lines.

Every column is read as text (CSV, TSV) or with its own type (Parquet), so
nothing but the added geo columns changes; rows keep their order. Files are
read twice in a streaming way: once for the location column (distinct values
and counts), once to write the output, so memory follows the number of
distinct strings, not the number of rows.
"""

from __future__ import annotations

import codecs
import contextlib
import csv
import json
import os
import shutil
import sys
import tempfile
from collections import Counter
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import polars as pl

from ..errors import InputError
from .schema import GEO_FIELDS, NUMERIC_FIELDS, GeoRow

__all__ = [
    "FORMATS",
    "Source",
    "as_text_row",
    "count_values",
    "find_ragged",
    "lazy_table",
    "open_source",
    "output_format",
    "read_columns",
    "read_header",
    "set_aside",
    "write_output",
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
NULL_KEY = "\x00"  # join key standing for a missing value
csv.field_size_limit(min(sys.maxsize, 2**31 - 1))


@dataclass
class Source:
    name: str  # as the user gave it, for messages
    path: Path  # a readable file in UTF-8 (stdin and other encodings are copied)
    format: str
    separator: str = ","
    temp: list[Path] = field(default_factory=list)

    def cleanup(self) -> None:
        for p in self.temp:
            with contextlib.suppress(OSError):
                p.unlink()


def _tempfile(suffix: str, near: Path | None = None) -> Path:
    fd, name = tempfile.mkstemp(prefix="geonorm-", suffix=suffix, dir=near)
    os.close(fd)
    return Path(name)


def _detect_format(path: Path, head: bytes, given: str | None) -> str:
    if given:
        return given
    ext = _EXTENSIONS.get(path.suffix.lower())
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


def _first_invalid_utf8_line(path: Path) -> int | None:
    with open(path, "rb") as fh:
        for n, line in enumerate(fh, start=1):
            try:
                line.decode("utf-8")
            except UnicodeDecodeError:
                return n
    return None


def open_source(
    input: str | Path,
    *,
    encoding: str = "utf-8",
    separator: str | None = None,
    input_format: str | None = None,
) -> Source:
    """Check the input and make it a readable UTF-8 file (copying stdin if needed)."""
    name = str(input)
    temp: list[Path] = []
    if name == "-":
        path = _tempfile(".in")
        with open(path, "wb") as fh:
            shutil.copyfileobj(sys.stdin.buffer, fh, 1 << 20)
        temp.append(path)
        name = "standard input"
    else:
        path = Path(input)
        if not path.exists():
            raise InputError(
                f"input file {path} does not exist", hint="check the path and try again"
            )
        if path.is_dir():
            raise InputError(f"{path} is a folder, not a file", hint="pass the file inside it")
    with open(path, "rb") as fh:
        head = fh.read(8192)
    if not head:
        for p in temp:
            p.unlink()
        raise InputError(f"{name} is empty", hint="pass a file with a header line and rows")
    fmt = _detect_format(path, head, input_format)
    for magic, what in _MAGIC.items():
        if head.startswith(magic) and fmt != "parquet":
            for p in temp:
                p.unlink()
            raise InputError(
                f"{name} looks like {what}, not a table geonorm reads",
                hint="export it as CSV, or pass a CSV, TSV, Parquet or JSON Lines file",
            )
    if fmt == "parquet":
        if not head.startswith(b"PAR1"):
            raise InputError(
                f"{name} is not a Parquet file",
                hint="pass `format` to say what it is, or check the file",
            )
        return Source(name, path, fmt, temp=temp)
    enc = encoding.lower().replace("_", "-")
    if head[:2] in (b"\xff\xfe", b"\xfe\xff") and enc in ("utf-8", "utf8", "utf-8-sig"):
        enc = "utf-16"  # a UTF-16 byte order mark says what the file is
    if enc not in ("utf-8", "utf8", "utf-8-sig"):
        try:
            codecs.lookup(enc)
        except LookupError as exc:
            raise InputError(
                f"unknown encoding {encoding!r}",
                hint="use a name Python knows, such as utf-8, latin-1, cp1252 or utf-16",
            ) from exc
        path = _transcode(path, enc, name)
        temp.append(path)
        with open(path, "rb") as fh:
            head = fh.read(8192)
    elif head.count(b"\x00") > len(head) // 10:
        raise InputError(
            f"{name} looks like a binary file, not text",
            hint="pass a CSV, TSV, Parquet or JSON Lines file, or give its `encoding`",
        )
    if head.startswith(codecs.BOM_UTF8):
        head = head[3:]
    sep = separator or (
        "\t" if fmt == "tsv" else _sniff_separator(head.split(b"\n")[0].decode("utf-8", "replace"))
    )
    return Source(name, path, fmt, sep, temp)


def output_format(output: str, given: str | None, source: Source) -> str:
    if given:
        if given not in FORMATS:
            raise InputError(
                f"unknown output format {given!r}", hint=f"use one of: {', '.join(FORMATS)}"
            )
        return given
    if output == "-":
        return source.format
    fmt = _EXTENSIONS.get(Path(output).suffix.lower())
    if fmt is None:
        raise InputError(
            f"cannot tell the output format from {output!r}",
            hint="end the name with .csv, .tsv, .parquet or .jsonl, or pass `format`",
        )
    return fmt


def _scan(source: Source) -> pl.LazyFrame:
    if source.format == "parquet":
        return pl.scan_parquet(source.path)
    return pl.scan_csv(
        source.path,
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
    except (pl.exceptions.PolarsError, OSError, UnicodeDecodeError) as exc:
        raise _polars_error(source, exc) from exc


def _polars_error(source: Source, exc: Exception) -> InputError:
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
    first = text.strip().splitlines()[0] if text.strip() else type(exc).__name__
    return InputError(
        f"cannot read {source.name} as {source.format.upper()} ({first})",
        hint="check the file's format, separator (`separator`) and encoding (`encoding`)",
    )


def read_header(source: Source) -> list[str]:
    if source.format == "jsonl":
        keys: dict[str, None] = {}
        for _, obj in _jsonl_records(source, limit=100):
            keys.update(dict.fromkeys(obj))
        return list(keys)
    try:
        return list(_scan(source).collect_schema().names())
    except pl.exceptions.NoDataError as exc:
        raise InputError(
            f"{source.name} is empty", hint="pass a file with a header line and rows"
        ) from exc
    except (pl.exceptions.PolarsError, OSError) as exc:
        raise _polars_error(source, exc) from exc


def _jsonl_records(source: Source, limit: int | None = None) -> Iterator[tuple[int, dict]]:
    with open(source.path, encoding="utf-8-sig", errors="strict") as fh:
        n = 0
        for lineno, line in enumerate(fh, start=1):
            if not line.strip():
                continue
            try:
                obj = json.loads(line)
            except json.JSONDecodeError as exc:
                raise InputError(
                    f"{source.name} line {lineno} is not valid JSON ({exc.msg})",
                    hint="each line of a JSON Lines file must be one JSON object",
                ) from exc
            if not isinstance(obj, dict):
                raise InputError(
                    f"{source.name} line {lineno} is not a JSON object",
                    hint="each line of a JSON Lines file must be one JSON object",
                )
            yield lineno, obj
            n += 1
            if limit and n >= limit:
                return


def _as_text(value: object) -> str | None:
    if value is None:
        return None
    return value if isinstance(value, str) else json.dumps(value, ensure_ascii=False)


def count_values(source: Source, column: str) -> tuple[dict[str | None, int], int]:
    """Distinct values of ``column`` with their row counts, and the row count."""
    if source.format == "jsonl":
        counts: Counter[str | None] = Counter()
        try:
            for _, obj in _jsonl_records(source):
                counts[_as_text(obj.get(column))] += 1
        except UnicodeDecodeError as exc:
            raise InputError(
                f"{source.name} is not valid UTF-8 text", hint="JSON Lines files must be UTF-8"
            ) from exc
        return dict(counts), sum(counts.values())
    try:
        lf = _scan(source).select(pl.col(column).cast(pl.String))
        df = lf.group_by(column).len().collect(engine="streaming")
        values = df.get_column(column).to_list()
    except (pl.exceptions.PolarsError, OSError, UnicodeDecodeError) as exc:
        raise _polars_error(source, exc) from exc
    lens = df.get_column("len").to_list()
    return dict(zip(values, lens, strict=False)), int(sum(lens))


def find_ragged(source: Source, expected: int) -> list[int]:
    """Line numbers of CSV records whose field count differs from the header's.

    A fast screen over raw lines (quoted text removed, separators counted) finds
    candidates; only if there are any does an exact CSV parse confirm them.
    """
    if source.format not in ("csv", "tsv"):
        return []
    try:
        lines = pl.scan_csv(
            source.path,
            has_header=False,
            separator="\x1f",
            quote_char=None,
            new_columns=["line"],
            infer_schema=False,
            encoding="utf8",
        )
        suspects = (
            lines.with_row_index("n")
            .filter(
                pl.col("line")
                .str.replace_all('"[^"]*"', "")
                .str.count_matches(source.separator, literal=True)
                != expected - 1
            )
            .select("n")
            .head(1)
            .collect(engine="streaming")
        )
    except (pl.exceptions.PolarsError, OSError):
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


def set_aside(source: Source, expected: int, bad_path: Path) -> tuple[Source, int]:
    """Write ragged records to ``bad_path`` (with their line numbers), the rest to a new source."""
    good = _tempfile(".csv")
    n_bad = 0
    with (
        open(source.path, encoding="utf-8-sig", newline="") as fh,
        open(good, "w", encoding="utf-8", newline="") as fg,
        open(bad_path, "w", encoding="utf-8", newline="") as fb,
    ):
        reader = csv.reader(fh, delimiter=source.separator)
        # Quote every field: Python's writer would leave a lone \r unquoted.
        wg = csv.writer(fg, delimiter=source.separator, lineterminator="\n", quoting=csv.QUOTE_ALL)
        wb = csv.writer(fb, lineterminator="\n", quoting=csv.QUOTE_ALL)
        header = next(reader)
        wg.writerow(header)
        wb.writerow(["line", "fields", "record"])
        start = reader.line_num
        for row in reader:
            if len(row) == expected or not row:
                if row:
                    wg.writerow(row)
            else:
                n_bad += 1
                wb.writerow([start + 1, len(row), source.separator.join(row)])
            start = reader.line_num
    return Source(source.name, good, source.format, source.separator, [*source.temp, good]), n_bad


def write_output(
    source: Source,
    column: str,
    mapping: Mapping[str | None, GeoRow],
    geo_names: list[str],
    out_fmt: str,
    output: str,
    progress: Callable[[int], None] | None = None,
) -> None:
    """Write every input row with the geo columns appended, via a temporary file renamed at the
    end."""
    to_stdout = output == "-"
    target = Path(output) if not to_stdout else None
    tmp = (
        _tempfile("." + out_fmt, near=target.parent if target else None)
        if target
        else _tempfile("." + out_fmt)
    )
    try:
        if source.format == "jsonl" and out_fmt == "jsonl":
            _write_jsonl(source, column, mapping, geo_names, tmp)
        else:
            _write_polars(source, column, mapping, geo_names, out_fmt, tmp)
        if to_stdout:
            with open(tmp, "rb") as fh:
                shutil.copyfileobj(fh, sys.stdout.buffer, 1 << 20)
            sys.stdout.buffer.flush()
            tmp.unlink()
        else:
            os.replace(tmp, target)  # type: ignore[arg-type]
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise InputError(
            f"cannot write {output} ({exc.strerror or exc})",
            hint="check the folder exists, is writable and the disk has space",
        ) from exc
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


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


def _mapping_frame(
    mapping: Mapping[str | None, GeoRow], geo_names: list[str], typed: bool
) -> pl.DataFrame:
    keys = [NULL_KEY if k is None else k for k in mapping]
    rows: list[Sequence[object]] = (
        list(mapping.values()) if typed else [as_text_row(g) for g in mapping.values()]
    )
    data: dict[str, list[object]] = {"__geo_key": list(keys)}
    schema: dict[str, pl.DataType] = {"__geo_key": pl.String()}
    for i, (name, geo_field) in enumerate(zip(geo_names, GEO_FIELDS, strict=True)):
        data[name] = [r[i] for r in rows]
        schema[name] = pl.Float64() if typed and geo_field in NUMERIC_FIELDS else pl.String()
    return pl.DataFrame(data, schema=schema)


def _write_polars(
    source: Source,
    column: str,
    mapping: Mapping[str | None, GeoRow],
    geo_names: list[str],
    out_fmt: str,
    tmp: Path,
) -> None:
    lf = lazy_table(source)
    table = _mapping_frame(mapping, geo_names, typed=out_fmt in ("parquet", "jsonl")).lazy()
    key = pl.col(column).cast(pl.String)
    if source.format == "jsonl":
        key = (
            pl.col(column).map_elements(_as_text, return_dtype=pl.String)
            if lf.collect_schema()[column] != pl.String
            else key
        )
    joined = (
        lf.with_columns(key.fill_null(NULL_KEY).alias("__geo_key"))
        .join(table, on="__geo_key", how="left", maintain_order="left")
        .drop("__geo_key")
    )
    try:
        if out_fmt == "parquet":
            joined.sink_parquet(tmp, maintain_order=True)
        elif out_fmt == "jsonl":
            joined.sink_ndjson(tmp, maintain_order=True)
        else:
            joined.sink_csv(tmp, separator="\t" if out_fmt == "tsv" else ",", maintain_order=True)
    except pl.exceptions.PolarsError as exc:
        raise _polars_error(source, exc) from exc


def _write_jsonl(
    source: Source,
    column: str,
    mapping: Mapping[str | None, GeoRow],
    geo_names: list[str],
    tmp: Path,
) -> None:
    """JSON Lines to JSON Lines: each record's text is kept byte for byte, geo keys appended."""
    with (
        open(source.path, encoding="utf-8-sig") as fin,
        open(tmp, "w", encoding="utf-8", newline="") as fout,
    ):
        for line in fin:
            body = line.rstrip("\r\n")
            if not body.strip():
                fout.write(line)
                continue
            obj = json.loads(body)
            geo = mapping[_as_text(obj.get(column))]
            extra = ", ".join(
                f"{json.dumps(n)}: {json.dumps(v, ensure_ascii=False)}"
                for n, v in zip(geo_names, geo, strict=False)
            )
            stripped = body.rstrip()
            inner = stripped[:-1].rstrip()
            sep = "" if inner.endswith("{") else ", "
            fout.write(f"{inner}{sep}{extra}}}\n")
