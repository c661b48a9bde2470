"""The cascade resolver: stages gather mentions, then one decision weighs them.

Decision outline
----------------
1. The not-a-place filter may end the cascade (empty, placeholder, junk, fictional).
2. Flags, postcodes, country, subdivision and city stages collect *mentions*;
   the fuzzy stage runs only on words no exact stage explained.
3. Mentions are grouped into places: a country, subdivision or flag that
   follows a city qualifies it ("Perth, Scotland"); a second city, or a
   container that fits nothing before it, starts a new place.
4. Each place gets a distribution over countries (readings weighted by
   population and name origin, constrained by its qualifiers). All places in
   one country → that country; in several → ``review`` with the candidates.
5. The evidence score is mapped to a calibrated confidence (``calibration.py``);
   ``matched`` needs confidence ≥ the accept threshold.
"""

from __future__ import annotations

import json
import math
import zlib
from collections import Counter, defaultdict
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field, replace

from .calibration import Calibration, load_calibration
from .index import PlaceIndex, load_index
from .normalize import NoisePhrases, Query, normalize, normalize_key
from .resolution import Candidate, Reason, Resolution, Status, settle
from .stages import (
    STOPWORDS,
    CityStage,
    CountryStage,
    FlagStage,
    FuzzyStage,
    Mention,
    NotAPlaceStage,
    PostcodeStage,
    Reading,
    Segmenter,
    SubdivisionStage,
)
from .tables import SOVEREIGN

__all__ = ["DEFAULT_ACCEPT", "RESOLVER_VERSION", "Resolver", "apply_accept"]

RESOLVER_VERSION = "1.2"
# Confidence needed for "matched". On the labelled development set, 0.7 keeps
# precision above 0.99 (see README); raise it for stricter output.
DEFAULT_ACCEPT = 0.70
# Prior odds against a person listing places in several countries (common practice
# in our tuning on labelled strings: most multi-part strings are one country).
MULTI_PENALTY = 0.2
# A location is short; a cell longer than this (a pasted document) is read up to here.
MAX_TEXT = 500
# How far the file's country mix may lean an ambiguous name: shares are raised
# to this power (0 = ignore the file, 1 = full Bayes with the file as prior).
# Kept low because a file's majority says little about one person's town.
PRIOR_EXPONENT = 0.3
NOT_A_PLACE_REASON = {
    "empty": Reason.EMPTY,
    "placeholder": Reason.PLACEHOLDER,
    "junk": Reason.JUNK,
    "fictional": Reason.FICTIONAL,
}


def apply_accept(res: Resolution, accept: float) -> Resolution:
    """Set ``matched`` or ``review`` from the confidence and the accept threshold."""
    return settle(res, accept)


@dataclass
class _Group:
    mentions: list[Mention] = field(default_factory=list)

    @property
    def readings(self) -> list[Reading]:
        return [r for m in self.mentions for r in m.readings]

    def countries(self) -> set[str]:
        return {r.place.cc for r in self.readings if r.place.cc}

    def has_point(self) -> bool:
        return any(m.is_point for m in self.mentions)


def _dist(readings: Iterable[Reading]) -> dict[str, float]:
    """Share of each country in a mention's readings.

    A country counts with its heaviest reading, not the sum of them: a dozen
    villages called San Francisco do not make one city. Cities weigh by
    population times the square root of how many names GeoNames knows them by
    (relative to a typical 20): size and fame, as a reader would weigh them.
    """
    d: dict[str, float] = defaultdict(float)
    for r in readings:
        if r.place.cc:
            w = r.weight * r.similarity**4
            if r.place.kind == "city":
                w *= math.sqrt(
                    (1 + r.place.fame) / 21
                )  # fame: Barcelona, Spain over Barcelona, Venezuela
            d[r.place.cc] = max(d[r.place.cc], w)
    total = sum(d.values())
    return {c: v / total for c, v in d.items()} if total > 0 else {}


def _is_container_reading(r: Reading) -> bool:
    return r.place.kind in ("country", "subdivision", "area")


class Resolver:
    """Resolve free-text locations. Thread-safe after construction.

    >>> r = Resolver()                      # doctest: +SKIP
    >>> r.resolve("austin tx").country      # doctest: +SKIP
    'US'
    """

    def __init__(
        self,
        index: PlaceIndex | None = None,
        *,
        accept: float = DEFAULT_ACCEPT,
        calibration: Calibration | None = None,
        progress=None,
    ) -> None:
        if not 0.0 <= accept <= 1.0:
            from ..errors import InputError

            raise InputError(
                f"--accept must be between 0 and 1, got {accept}",
                hint="use a probability such as 0.8",
            )
        self.index = index or load_index(progress=progress)
        self.accept = accept
        self.calibration = calibration or load_calibration()
        prefix: list[str] = []
        suffix: list[str] = []
        anywhere: list[str] = []
        for phrase, position in self.index.noise:
            {"prefix": prefix, "suffix": suffix}.get(position, anywhere).append(phrase)
        self.noise = NoisePhrases(prefix, suffix, anywhere)
        seg = Segmenter(self.index)
        self.not_a_place = NotAPlaceStage(self.index)
        self.flags = FlagStage(self.index)
        self.postcodes = PostcodeStage(self.index)
        self.segmenter = seg
        self.name_stages = [
            CountryStage(self.index, seg),
            SubdivisionStage(self.index, seg),
            CityStage(self.index, seg),
        ]
        self.fuzzy = FuzzyStage(self.index)

    @property
    def version(self) -> str:
        """Identifies everything an answer depends on except the accept threshold."""
        cal = self.calibration
        curves = json.dumps([cal.method, cal.a, cal.b, cal.by_reason], sort_keys=True)
        return (
            f"{RESOLVER_VERSION}+index{self.index.meta.get('index_version')}"
            f"@{self.index.meta.get('built_at')}+cal{zlib.crc32(curves.encode()):08x}"
        )

    # -- public API ---------------------------------------------------------
    def normalize(self, raw: object) -> Query:
        return normalize(raw, self.noise)

    def key(self, raw: object) -> str:
        """The cache key of a raw value (see ``normalize_key``); answers depend on it alone."""
        if not isinstance(raw, str):
            raw = "" if raw is None else str(raw)
        return normalize_key(raw)

    def resolve(self, raw: object) -> Resolution:
        """Resolve one string. Never raises on any text.

        Only the first ``MAX_TEXT`` characters of a very long cell are read.
        """
        if isinstance(raw, str) and len(raw) > MAX_TEXT:
            raw = raw[:MAX_TEXT]
        query = self.normalize(raw)
        kind = self.not_a_place.resolve(query)
        if kind:
            return Resolution(
                Status.NOT_A_PLACE,
                NOT_A_PLACE_REASON.get(kind, Reason.JUNK),
                confidence=1.0,
                score=1.0,
            )
        mentions = self.mentions(query)
        res = self._decide(query, mentions)
        res.confidence = (
            round(self.calibration.apply(res.score, res.reason), 4) if res.country else 0.0
        )
        return apply_accept(res, self.accept)

    def reconsider(self, res: Resolution, prior: Mapping[str, float]) -> Resolution:
        """Re-rank an ambiguous answer with the file's country prior.

        The answer's per-country evidence is multiplied by the prior (tempered by
        ``PRIOR_EXPONENT``); if that changes the country, or makes it surer, the
        answer is rebuilt from the candidate of the new country.
        """
        if not res.evidence:
            return res
        weighted = {
            c: v * (prior.get(c, 0.0) + 0.02) ** PRIOR_EXPONENT for c, v in res.evidence.items()
        }
        total = sum(weighted.values())
        top = max(weighted, key=lambda c: (weighted[c], c))
        p_new, p_old = weighted[top] / total, res.evidence.get(res.country, 0.0)
        if top == res.country and p_new <= p_old:
            return res
        cand = next((c for c in res.candidates if c.country == top), Candidate(top))
        new = replace(
            res,
            country=top,
            evidence={c: round(v / total, 4) for c, v in weighted.items()},
            reason=Reason.FILE_PRIOR,
        )
        if top != res.country:
            new.subdivision, new.city, new.lat, new.lon, new.geonameid = (
                cand.subdivision,
                cand.city,
                cand.lat,
                cand.lon,
                None,
            )
        new.score = max(1e-4, min(0.9999, res.score * p_new / max(p_old, 1e-4)))
        new.confidence = round(self.calibration.apply(new.score, Reason.FILE_PRIOR), 4)
        return new

    def resolve_many(self, values: Mapping[str, int] | Iterable[str]) -> dict[str, Resolution]:
        """Resolve distinct strings (optionally with row counts) with a file-level prior.

        The countries of the confidently matched strings, weighted by rows, form a
        prior that re-ranks the ambiguous strings of the same file.
        """
        counts = dict(values) if isinstance(values, Mapping) else Counter(values)
        results = {v: self.resolve(v) for v in counts}
        return self.apply_file_prior(results, counts)

    def apply_file_prior(
        self, results: dict[str, Resolution], counts: Mapping[str, int], accept: float | None = None
    ) -> dict[str, Resolution]:
        """Re-rank the ambiguous answers of one file with the file's country prior (in place);
        re-ranked answers get their status from ``accept`` (default: the resolver's)."""
        prior = self.file_prior(results, counts)
        if prior:
            for k, res in results.items():
                if (
                    len(res.evidence) >= 2
                    and res.status in (Status.REVIEW, Status.MATCHED)
                    and res.reason in (Reason.AMBIGUOUS, Reason.CITY_BY_SIZE)
                ):
                    results[k] = apply_accept(
                        self.reconsider(res, prior), self.accept if accept is None else accept
                    )
        return results

    @staticmethod
    def file_prior(
        results: Mapping[str, Resolution], counts: Mapping[str, int], min_rows: int = 50
    ) -> dict[str, float]:
        """Country shares among confidently matched rows, by row count (Laplace-smoothed)."""
        tally: Counter[str] = Counter()
        matched, file_prior = Status.MATCHED, Reason.FILE_PRIOR
        for k, n in counts.items():
            res = results[k]
            if res.status is matched and res.confidence >= 0.9 and res.reason is not file_prior:
                tally[res.country] += n
        total = sum(tally.values())
        if total < min_rows:
            return {}
        n_countries = max(1, len(tally))
        return {c: (n + 1) / (total + n_countries) for c, n in tally.items()}

    # -- stages -------------------------------------------------------------
    def mentions(self, query: Query) -> list[Mention]:
        spans = self.segmenter.spans(query)
        found: list[Mention] = []
        found += self.flags.resolve(query)
        found += self.postcodes.resolve(query)
        by_span: dict[tuple[int, int, str], Mention] = {}
        for stage in self.name_stages:
            for m in stage.resolve(query, spans):
                key = (m.part, m.start, m.text)
                if key in by_span:
                    by_span[key].readings.extend(m.readings)
                else:
                    by_span[key] = m
        covered = {
            (s.part, i)
            for s in spans
            for i in range(s.start, s.end)
            if (s.part, s.start, s.key) in by_span
        }
        if len(spans) == 1 and spans[0].key == query.folded and by_span:
            covered = {(pi, i) for pi, p in enumerate(query.parts) for i in range(len(p.tokens))}
        # Words explained by nothing: try spelling-tolerant matching on them, and on
        # whole parts whose only exact readings are small places.
        # A part explained only by small places may be a misspelt big one ("Johannesberg"
        # is a German village); a town of 5,000+ met by its own name is taken as written.
        weak_parts = {m.part for m in by_span.values()} - {
            m.part
            for m in by_span.values()
            if max(r.place.pop for r in m.readings) >= 15000
            or any(
                _is_container_reading(r)
                or r.place.kind == "region"
                or r.origin == "alias"
                or (r.origin == "name" and r.place.pop >= 5000)
                for r in m.readings
            )
        }
        for pi in weak_parts:
            covered -= {(pi, i) for i in range(len(query.parts[pi].tokens))}
        fuzzy = self.fuzzy.resolve(query, covered)
        # A part whose words are explained only in pieces ("Ne York" → York) may be one
        # misspelt name: a close spelling of the whole part wins over the pieces.
        for pi, part in enumerate(query.parts):
            words = [t.key for t in part.tokens]
            if part.street or len(words) < 2 or pi in weak_parts:
                continue
            loose = [
                i for i, w in enumerate(words) if (pi, i) not in covered and w not in STOPWORDS
            ]
            if loose and len(part.key) >= FuzzyStage.min_len and part.key.isascii():
                whole = self.fuzzy.match(part.key, pi, 0)
                if whole is not None and max(r.weight for r in whole.readings) >= 5 * max(
                    (r.weight for k, m in by_span.items() if k[0] == pi for r in m.readings),
                    default=0.0,
                ):
                    weak_parts.add(pi)
                    fuzzy = [m for m in fuzzy if m.part != pi] + [whole]
        for fm in fuzzy:
            for key in [k for k, m in by_span.items() if k[0] == fm.part and k[0] in weak_parts]:
                del by_span[key]
        for fm in fuzzy:
            by_span[(fm.part, fm.start, fm.text)] = fm
        found += sorted(by_span.values(), key=lambda m: (m.part, m.start))
        return self._prune(found)

    @staticmethod
    def _prune(mentions: list[Mention]) -> list[Mention]:
        """Drop readings a reader would not consider.

        A country name outweighs towns and provinces of the same name elsewhere
        (Lebanon, PA); a world region or named area outweighs small towns
        (Middle East, MD); in longer texts, hamlets met only by an alternate
        name are noise (a street word, "one", "plot").
        """
        for m in mentions:
            named = {
                r.place.cc
                for r in m.readings
                if r.place.kind == "country" and r.origin in ("name", "alias", "flag")
            }
            if named:
                m.readings = [
                    r
                    for r in m.readings
                    if r.place.cc in named
                    or (
                        (r.place.kind != "city" or r.place.pop >= 1_000_000)
                        and r.origin not in ("lower_sub", "translation", "alt", "short")
                    )
                ]
            if any(r.origin == "code3" for r in m.readings):
                # Three capitals that are an ISO code: the country, not a town or a state.
                m.readings = [
                    r
                    for r in m.readings
                    if r.origin not in ("postal", "sub_code") and r.place.kind != "city"
                ]
            if any(r.place.kind in ("region", "area") for r in m.readings):
                m.readings = [
                    r for r in m.readings if r.place.kind != "city" or r.place.pop >= 100_000
                ]
            main = max(
                (r.place.pop for r in m.readings if r.place.kind == "city" and r.origin == "name"),
                default=0,
            )
            if main >= 100_000:
                # A large place called exactly this outweighs places that only carry the
                # name as a variant or former name (Islamabad, not Chittagong's old name),
                # and a country whose name this is only in another language (Salvador, Bahia).
                m.readings = [
                    replace(r, weight=r.weight * 0.2)
                    if (
                        (r.origin in ("alt", "short") and r.place.kind == "city")
                        or (
                            r.origin == "translation"
                            and r.place.kind == "country"
                            and main >= 500_000
                        )
                    )
                    else r
                    for r in m.readings
                ]
            if any(r.origin == "alias" for r in m.readings):
                # A curated nickname beats a code of the same letters (KL, LA, DC).
                m.readings = [
                    r
                    for r in m.readings
                    if r.origin not in ("code2", "code3", "postal", "sub_code")
                ]
            if len(mentions) > 1:
                m.readings = [
                    r
                    for r in m.readings
                    if not (
                        r.place.kind == "city"
                        and r.origin in ("alt", "short")
                        and r.place.pop < 15_000
                    )
                ]
        return [m for m in mentions if m.readings]

    # -- decision -----------------------------------------------------------
    def _group(self, mentions: list[Mention]) -> tuple[list[_Group], list[Mention]]:
        """Split mentions into places; return the groups and the global qualifiers."""
        flags = [m for m in mentions if m.source in ("flag", "postcode")]
        rest = [m for m in mentions if m.source not in ("flag", "postcode")]
        groups: list[_Group] = []
        qualifiers: list[Mention] = []
        if len({r.place.cc for m in flags for r in m.readings}) <= 1:
            qualifiers = flags  # one flag or postcode qualifies the whole text
        else:
            rest = flags + rest  # several flags are several places
        for m in rest:
            if not groups:
                groups.append(_Group([m]))
                continue
            g = groups[-1]
            gcountries = g.countries() | {SOVEREIGN.get(c, c) for c in g.countries()}
            container = [
                r for r in m.readings if _is_container_reading(r) and r.place.cc in gcountries
            ]
            if container and m.source != "flag":
                sub_ok = [
                    r
                    for r in container
                    if r.place.kind != "subdivision"
                    or not g.has_point()
                    or any(p.place.sub == r.place.sub for p in g.readings if p.place.kind == "city")
                ]
                if sub_ok:
                    m.readings = sub_ok
                    g.mentions.append(m)
                    continue
            gids = {r.place.id for r in g.readings}
            if any(r.place.id in gids for r in m.readings):
                m.readings = [r for r in m.readings if r.place.id in gids]
                g.mentions.append(m)
                continue
            if all(r.origin in ("postal", "sub_code") for r in m.readings):
                continue  # an abbreviation qualifies what precedes it; one that fits nothing is noise
            groups.append(_Group([m]))
        return groups, qualifiers

    def _group_dist(
        self, g: _Group, qualifiers: list[Mention]
    ) -> tuple[dict[str, float], list[list[Reading]]]:
        """Country distribution of one place, and each mention's consistent readings."""
        mentions = g.mentions + qualifiers
        containers = [
            m
            for m in mentions
            if all(_is_container_reading(r) or r.place.kind == "region" for r in m.readings)
        ]
        allowed_cc: set[str] | None = None
        allowed_sub: set[str] = set()
        for m in containers:
            ccs = {r.place.cc for r in m.readings if r.place.cc}
            ccs |= {c for c, s in SOVEREIGN.items() if s in ccs}
            if ccs:
                allowed_cc = ccs if allowed_cc is None else (allowed_cc & ccs) or allowed_cc
            heaviest = max(m.readings, key=lambda r: r.weight)
            if heaviest.place.kind in ("subdivision", "area"):
                allowed_sub |= {r.place.sub for r in m.readings if r.place.kind == "subdivision"}
        kept: list[list[Reading]] = []
        for m in mentions:
            rs = m.readings
            if allowed_cc is not None and m not in containers:
                rs = [r for r in rs if r.place.cc in allowed_cc] or rs
            if allowed_sub and m not in containers:
                in_sub = [r for r in rs if r.place.sub in allowed_sub]
                rs = in_sub or rs
            kept.append(rs)
        dist: dict[str, float] = {}
        for rs in kept:
            d = _dist(rs)
            if not d:
                continue
            # Territories inherit their sovereign's qualifier: "Hong Kong, China".
            for terr, sov in SOVEREIGN.items():
                if sov in d and terr in dist and terr not in d:
                    d[terr] = d[sov]
            if not dist:
                dist = d
            else:
                merged = {c: dist[c] * d[c] for c in dist if c in d}
                if sum(merged.values()) > 0:
                    dist = merged
            total = sum(dist.values())
            dist = {c: v / total for c, v in dist.items()}
        return dist, kept

    def _decide(self, query: Query, mentions: list[Mention]) -> Resolution:
        if not mentions:
            return Resolution(Status.UNMATCHED, Reason.NO_MATCH)
        groups, qualifiers = self._group(mentions)
        regional = [g for g in groups if all(r.place.kind == "region" for r in g.readings)]
        located = [g for g in groups if g not in regional]
        if not located and not qualifiers:
            return Resolution(Status.UNMATCHED, Reason.WORLD_REGION)
        if not located:
            located = [_Group(qualifiers)]
            qualifiers = []
        dists = []
        for g in located:
            d, kept = self._group_dist(g, qualifiers)
            dists.append((g, d, kept))
        dists = [t for t in dists if t[1]]
        if not dists:
            return Resolution(Status.UNMATCHED, Reason.NO_MATCH)
        # A nationality word next to a place is who the person is, not where
        # ("proud Brazilian in Lisbon"): it qualifies, it does not add a place.
        if len(dists) > 1:
            placed = [
                t for t in dists if not all(r.origin == "adjective" for rs in t[2] for r in rs)
            ]
            dists = placed or dists
        # A part that could be anywhere ("Centro": a region in a dozen countries)
        # says nothing next to a part that is clear.
        if len(dists) > 1 and any(max(d.values()) >= 0.9 for _, d, _ in dists):
            dists = [t for t in dists if max(t[1].values()) >= 0.5]
        # Drop weak stray places (a word that happens to be a town's name) when
        # the rest of the text names a country or a larger place.
        if len(dists) > 1:
            strong = [
                t
                for t in dists
                if (
                    max(r.place.pop for rs in t[2] for r in rs) >= 20000
                    or any(_is_container_reading(r) for rs in t[2] for r in rs)
                )
                and not all(m.source == "fuzzy" for m in t[0].mentions)
            ]
            dists = strong or dists
        countries = set().union(*(d.keys() for _, d, _ in dists))
        joint = {c: math.prod(d.get(c, 0.0) for _, d, _ in dists) for c in countries}
        total = sum(joint.values())
        bests = [max(d, key=lambda c: (d[c], c)) for _, d, _ in dists]
        distinct = sorted(set(bests), key=bests.index)
        multi_score = math.prod(max(d.values()) for _, d, _ in dists) * MULTI_PENALTY ** (
            len(distinct) - 1
        )
        top = max(joint, key=lambda c: (joint[c], c)) if total > 0 else ""
        if len(distinct) > 1 and (total <= 0 or multi_score > joint[top]):
            cands = [self._candidate(c, kept, d[c]) for (_, d, kept), c in zip(dists, bests)]
            return Resolution(
                Status.REVIEW,
                Reason.SEVERAL_COUNTRIES,
                candidates=cands[:5],
                evidence={c: round(v, 4) for c, v in sorted(joint.items())} if total else {},
            )
        p = joint[top] / total
        evidence = {
            c: round(v / total, 4)
            for c, v in sorted(joint.items(), key=lambda t: -t[1])[:5]
            if v / total >= 0.005
        }
        res = Resolution(Status.MATCHED, Reason.CITY, country=top, evidence=evidence)
        self._fill(res, query, dists, top, qualifiers)
        res.score = self._score(p, res, query, dists)
        res.candidates = [
            self._candidate(c, [r for _, _, kept in dists for r in kept], evidence[c])
            for c in evidence
        ]
        return res

    @staticmethod
    def _candidate(cc: str, kept, score: float) -> Candidate:
        flat = [r for rs in kept for r in (rs if isinstance(rs, list) else [rs])]
        cities = [r for r in flat if r.place.kind == "city" and r.place.cc == cc]
        best = max(cities, key=lambda r: r.weight, default=None)
        if best:
            return Candidate(
                cc, best.place.sub, best.place.name, best.place.lat, best.place.lon, round(score, 4)
            )
        subs = {r.place.sub for r in flat if r.place.kind == "subdivision" and r.place.cc == cc}
        return Candidate(cc, subs.pop() if len(subs) == 1 else "", "", None, None, round(score, 4))

    def _fill(
        self, res: Resolution, query: Query, dists, top: str, qualifiers: list[Mention]
    ) -> None:
        """Subdivision, city and reason for a single-country answer."""
        subs_named: set[str] = set()
        points: list[Reading] = []
        sources: set[str] = set()
        ambiguous_points = False
        undetermined = False
        for g, _, kept in dists:
            group_points = []
            for m, rs in zip(g.mentions + qualifiers, kept):
                rs_c = [r for r in rs if r.place.cc == top or SOVEREIGN.get(r.place.cc) == top]
                sources.add(m.source)
                cont = [r for r in rs_c if r.place.kind in ("subdivision", "area") and r.place.sub]
                heaviest_here = max(rs_c, key=lambda r: r.weight, default=None)
                if (
                    cont
                    and all(_is_container_reading(r) for r in rs)
                    and heaviest_here is not None
                    and heaviest_here.place.kind != "country"
                ):
                    # "Mexico" as a qualifier is the country, not also the State of Mexico.
                    subs_named |= {r.place.sub for r in cont}
                point, split = self._point(rs_c)
                if split:
                    undetermined = True
                    continue
                if (
                    point is None
                    and len(dists) == 1
                    and heaviest_here is not None
                    and heaviest_here.place.kind == "subdivision"
                ):
                    subs_named |= {
                        r.place.sub
                        for r in rs_c
                        if r.place.kind == "subdivision"
                        and r.origin in ("name", "translation", "alias", "postal")
                    }
                if point is not None:
                    group_points.append(point)
                    if len({r.place.cc for r in rs if r.place.kind == "city"}) > 1:
                        ambiguous_points = True
            if group_points:
                points.append(max(group_points, key=lambda r: r.weight))
        if undetermined:
            points, subs_named = [], set()
        if len(dists) == 1 and len(points) == 1:
            city = points[0].place
            if not subs_named or city.sub in subs_named:
                res.city, res.lat, res.lon, res.geonameid = city.name, city.lat, city.lon, city.gid
                res.subdivision = city.sub
        if not res.city:
            subs = subs_named or {r.place.sub for r in points}
            if len(dists) > 1:
                subs = {r.place.sub for r in points}
                if len(points) < len(dists):
                    subs = subs_named if len(subs_named) == 1 and not points else set()
            if len(subs) == 1:
                res.subdivision = subs.pop()
        elif subs_named and res.subdivision not in subs_named:
            res.subdivision = ""
        if res.country != top:
            res.country = top
        # Reason, most specific evidence first.
        in_top = [r for _, _, kept in dists for rs in kept for r in rs if r.place.cc == top]
        heaviest = max(in_top, key=lambda r: r.weight, default=None)
        if len(dists) > 1:
            res.reason = Reason.SAME_COUNTRY_PLACES
        elif "fuzzy" in sources:
            res.reason = Reason.SPELLING
        elif "flag" in sources and not points:
            res.reason = Reason.FLAG
        elif points:
            if any(r.origin == "alias" for r in points):
                res.reason = Reason.NICKNAME
            elif len(dists[0][0].mentions + qualifiers) > 1:
                res.reason = Reason.CITY_WITH_CONTEXT
            elif ambiguous_points:
                res.reason = Reason.CITY_BY_SIZE
            else:
                res.reason = Reason.CITY
        elif "postcode" in sources:
            res.reason = Reason.POSTCODE
        elif heaviest is not None and heaviest.place.kind == "country":
            res.reason = (
                Reason.COUNTRY_CODE
                if heaviest.origin in ("code2", "code3")
                else Reason.COUNTRY_NAME
            )
        elif heaviest is not None and heaviest.place.kind == "area":
            res.reason = Reason.NAMED_AREA
        elif heaviest is not None and heaviest.origin == "alias":
            res.reason = Reason.NICKNAME
        else:
            res.reason = Reason.SUBDIVISION
        if (
            len(res.evidence) > 1
            and max(res.evidence.values()) < 0.9
            and res.reason
            in (
                Reason.SUBDIVISION,
                Reason.COUNTRY_NAME,
                Reason.COUNTRY_CODE,
                Reason.NAMED_AREA,
                Reason.CITY,
            )
        ):
            res.reason = Reason.AMBIGUOUS

    @staticmethod
    def _point(readings: list[Reading]) -> tuple[Reading | None, bool]:
        """The city a mention names, if it names one; and whether it is torn
        between a city and a subdivision elsewhere in the country.

        A country name is a city only when the city is most of it (Singapore,
        not Kosovo Polje for "Kosovo"). A subdivision named like its capital is
        the city unless the city is under 10% of it (Lisbon and Porto are the
        cities; Quebec is the province). A subdivision named like a city in
        another subdivision wins unless the city is at least half its size;
        between half and the same size, only the country is determined.
        """
        cities = [r for r in readings if r.place.kind == "city"]
        if not cities:
            return None, False
        best = max(cities, key=lambda r: r.weight)
        # A translation is weaker: Finnish "Brasilia" is Brazil, but the city it names is meant.
        countries = [r for r in readings if r.place.kind == "country" and r.origin != "translation"]
        if countries and best.place.pop < 0.5 * max(c.place.pop for c in countries):
            return None, False
        subs = [
            r
            for r in readings
            if r.place.kind in ("subdivision", "area")
            and r.origin in ("name", "translation", "alias")
        ]
        if not subs:
            return best, False
        if best.origin == "short":
            return None, False  # "Morelos" is the state, not Ecatepec de Morelos
        same = [r.weight for r in subs if r.place.sub == best.place.sub]
        other = [r.weight for r in subs if r.place.sub != best.place.sub]
        if same and best.weight < 0.1 * max(same):
            return None, False
        if other and not same:
            if best.weight < 0.5 * max(other):
                return None, False
            if best.weight < max(other):
                return None, True
        return best, False

    @staticmethod
    def _score(p: float, res: Resolution, query: Query, dists) -> float:
        """Uncalibrated evidence score in (0, 1)."""
        score = p
        all_readings = [
            r for _, _, kept in dists for rs in kept for r in rs if r.place.cc == res.country
        ]
        sims = [r.similarity for r in all_readings if r.similarity < 1.0]
        if sims:
            score *= min(sims) ** 1.5
        # Words nobody explained lower the score. Within a part that names the place, a
        # stray word is suspicious; a whole part nobody explained (a street line, an
        # aside) much less so.
        parts_with = {m.part for g, _, _ in dists for m in g.mentions}
        for pi, part in enumerate(query.parts):
            words = [t.key for t in part.tokens if t.key not in STOPWORDS]
            if pi in parts_with:
                used = sum(
                    len(m.text.split()) for g, _, _ in dists for m in g.mentions if m.part == pi
                )
                score *= 0.85 ** min(max(0, len(words) - used), 3)
            elif words and not part.street:
                score *= 0.95
        # A bare small place met only by an alternate name is weak evidence.
        best = max(all_readings, key=lambda r: r.weight, default=None)
        if (
            best
            and best.place.kind == "city"
            and len(dists) == 1
            and len(dists[0][0].mentions) == 1
        ):
            if best.origin == "alt" and best.place.pop < 15_000:
                score *= 0.75
            score *= min(1.0, 0.3 + 0.15 * math.log10(max(best.place.pop, 1)))
        if (
            best
            and best.origin == "adjective"
            and all(r.origin == "adjective" for r in all_readings)
        ):
            score *= 0.6
        return max(1e-4, min(0.9999, score))
