"""Tables of place knowledge the resolver consults, read from ``gazetteer/*.csv``.

Each table is a CSV file with a header line (see ``gazetteer/SOURCES.md`` for
where its values come from). They are read once, when this module is imported;
a missing or malformed file raises :class:`~geonorm.errors.PlaceIndexError` naming
the file and line.
"""

from __future__ import annotations

import csv
import re
from collections.abc import Sequence
from pathlib import Path

from ..errors import PlaceIndexError
from ..paths import gazetteer_dir

__all__ = [
    "BARE_POSTAL_COUNTRIES",
    "COUNTRY_ABBREVIATIONS",
    "GENERIC_PLACE_WORDS",
    "LOWER_WORD_CODES",
    "PLACE_CUES",
    "POSTCODE_FORMATS",
    "SAINT_ABBREVIATIONS",
    "SOVEREIGN",
    "STOPWORDS",
    "STREET_SUFFIX_ONLY",
    "STREET_WORDS",
    "UNSAFE_ALPHA3",
    "read_table",
]


def _bad_line(path: Path, line: int, problem: str, columns: Sequence[str]) -> PlaceIndexError:
    return PlaceIndexError(
        f"curated table {path}: line {line}: {problem}",
        hint=f"fix or remove that line; the header is: {','.join(columns)}",
    )


def _field_count(row: dict, width: int) -> int:
    """How many fields a line had: csv.DictReader files extra ones under None and
    fills missing ones with None."""
    extra = row.get(None)
    if extra is not None:
        return width + len(extra)
    return sum(v is not None for v in row.values())


def read_table(
    name: str,
    required: Sequence[str],
    optional: Sequence[str] = (),
    folder: Path | None = None,
) -> list[dict[str, str]]:
    """The rows of ``gazetteer/<name>``, values stripped.

    ``required`` columns must be filled on every row, ``optional`` ones may be
    empty; other columns (comments) are kept as they are.
    """
    path = (folder or gazetteer_dir()) / name
    columns = [*required, *optional]
    if not path.is_file():
        raise PlaceIndexError(
            f"curated table {name} is missing from {path.parent}",
            hint="reinstall geonorm; the gazetteer/ folder must ship with it",
        )
    try:
        with open(path, encoding="utf-8", newline="") as fh:
            reader = csv.DictReader(fh)
            header = reader.fieldnames or []
            lacking = [c for c in columns if c not in header]
            if lacking:
                raise _bad_line(path, 1, f"the header lacks {', '.join(lacking)}", columns)
            rows = []
            for row in reader:
                fields = _field_count(row, len(header))
                if fields != len(header):
                    problem = f"{fields} fields where the header has {len(header)}"
                    raise _bad_line(path, reader.line_num, problem, header)
                clean = {k: v.strip() for k, v in row.items()}
                empty = [c for c in required if not clean[c]]
                if empty:
                    raise _bad_line(path, reader.line_num, f"empty {', '.join(empty)}", header)
                rows.append(clean)
    except (UnicodeDecodeError, csv.Error) as exc:
        raise PlaceIndexError(
            f"curated table {path} cannot be read ({exc})",
            hint="save it as UTF-8 CSV with a header line",
        ) from exc
    return rows


def _words(name: str, column: str = "word") -> frozenset[str]:
    return frozenset(row[column] for row in read_table(name, [column]))


def _postcode_formats(folder: Path | None = None) -> dict[str, re.Pattern[str]]:
    formats = {}
    rows = read_table("postcode_formats.csv", ["country", "pattern"], folder=folder)
    for number, row in enumerate(rows, 2):  # one line per row, after the header
        try:
            formats[row["country"]] = re.compile(row["pattern"])
        except re.error as exc:
            path = (folder or gazetteer_dir()) / "postcode_formats.csv"
            bad = _bad_line(path, number, f"bad regular expression ({exc})", list(row))
            raise bad from exc
    return formats


# Postcode shapes whose format names the country (UK, Canadian and Irish codes);
# tried in the order of the file.
POSTCODE_FORMATS = _postcode_formats()

# Words that make a part the street line of an address.
STREET_WORDS = _words("street_words.csv")

# "St" ends a street name ("Baggot St") but starts a saint's name ("St Helier").
STREET_SUFFIX_ONLY = _words("street_suffix_only.csv")

# Words that name a part of many countries ("South", "Central", "Capital"): not
# indexed as names of subdivisions, where they would match everywhere.
GENERIC_PLACE_WORDS = _words("generic_place_words.csv")

# Long and short forms of a leading word ("saint " / "st "), each with its space.
SAINT_ABBREVIATIONS = tuple(
    (row["long"] + " ", row["short"] + " ")
    for row in read_table("saint_abbreviations.csv", ["long", "short"])
)

# Territories with their own ISO 3166-1 code and the state they belong to.
SOVEREIGN = {
    row["territory"]: row["sovereign"]
    for row in read_table("sovereign.csv", ["territory", "sovereign"])
}

# Short function words never looked up alone.
STOPWORDS = _words("stopwords.csv")

# Alpha-3 codes that are also everyday words or names: read only when typed in capitals.
UNSAFE_ALPHA3 = _words("unsafe_alpha3.csv", "code")

# Two-letter codes that are everyday words when typed in lower case.
LOWER_WORD_CODES = _words("lower_word_codes.csv", "code")

# Countries whose subdivision abbreviations stand for a place on their own.
BARE_POSTAL_COUNTRIES = _words("bare_postal_countries.csv", "country")

# Informal and sports abbreviations of countries ("SA" for South Africa, "CRO"),
# read only as a qualifier after a place: folded text (dots dropped) → ISO code.
COUNTRY_ABBREVIATIONS = {
    row["text"].casefold().replace(".", "").replace(" ", ""): row["country"]
    for row in read_table("country_abbreviations.csv", ["text", "country"])
}

# Words that tell which place of several is the current one ("now", "ex", "born in"):
# (folded phrase, role current|former, position before|after the place).
PLACE_CUES = tuple(
    (row["phrase"], row["role"], row["position"])
    for row in read_table("place_cues.csv", ["phrase", "role", "position"])
)
