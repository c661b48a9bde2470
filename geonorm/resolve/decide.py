"""The decision: weigh the mentions of one text into one answer.

Pure functions over mentions and readings; nothing here reads the index.

1. ``group_places``: mentions become places. A country, subdivision or flag
   that follows a city qualifies it ("Perth, Scotland"); a second city, or a
   container that fits nothing before it, starts a new place. One flag or
   postcode qualifies the whole text.
2. ``weigh``: each place gets a distribution over countries (readings weighted
   by population, fame and name origin, constrained by its qualifiers).
3. ``drop_minor_places``: nationality words, vague parts and weak stray words
   are not places of their own next to clearer ones.
4. ``decide``: places in several countries go to review with one candidate
   each; otherwise the country with the largest joint share is the answer, and
   ``fill_in`` adds subdivision, city and reason and ``evidence_score`` the
   uncalibrated score.

The status set here is provisional: ``resolution.settle`` sets the final one.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from functools import lru_cache
from operator import attrgetter

from .index import Place
from .mentions import code_text, cue_roles, ordinary_text, text_language, word_zipf
from .normalize import Query
from .resolution import Candidate, Reason, Resolution, Status
from .stages import Mention, Reading
from .tables import SOVEREIGN, STOPWORDS
from .tuning import (
    ADJECTIVE_FACTOR,
    AMBIGUOUS_SHARE,
    CAPITAL_SHARE,
    CITY_OF_COUNTRY_SHARE,
    CITY_OVER_SUBDIVISION_SHARE,
    CLEAR_SHARE,
    COMPARABLE_PRIOR,
    FAME_TYPICAL,
    JUNK_PRIOR,
    LOOSE_PART_FACTOR,
    MAX_CANDIDATES,
    MAX_STRAY_WORDS,
    MIN_EVIDENCE_SHARE,
    MULTI_PENALTY,
    ORDINARY_STRAY_WEIGHT,
    ORDINARY_WORD_ZIPF,
    PRIOR_FULL,
    SCORE_CEILING,
    SCORE_FLOOR,
    SIMILARITY_POWER,
    SIZE_BASE,
    SIZE_SLOPE,
    SMALL_ALT_FACTOR,
    SMALL_ALT_POP,
    SPELLING_POWER,
    STRAY_PLACE_POP,
    STRAY_WORD_FACTOR,
    VAGUE_SHARE,
)

__all__ = [
    "Group",
    "Weighed",
    "candidate",
    "city_point",
    "country_shares",
    "current_places",
    "decide",
    "drop_minor_places",
    "evidence_score",
    "group_places",
    "strength",
    "weigh",
]

_CONTAINER_KINDS = ("country", "subdivision", "area")
# Origins by which a subdivision is named outright, not as a short or lower form.
_SUBDIVISION_NAMES = ("name", "translation", "alias", "postal")
# Reasons a spread of evidence over several countries turns into "ambiguous".
_SETTLED_BY_ONE_NAME = (
    Reason.SUBDIVISION,
    Reason.COUNTRY_NAME,
    Reason.COUNTRY_CODE,
    Reason.NAMED_AREA,
    Reason.CITY,
)


def _is_container(r: Reading) -> bool:
    return r.place.kind in _CONTAINER_KINDS


def _territories_of() -> dict[str, list[str]]:
    """Each sovereign's territories (the inverse of ``SOVEREIGN``)."""
    territories: dict[str, list[str]] = {}
    for territory, sovereign in SOVEREIGN.items():
        territories.setdefault(sovereign, []).append(territory)
    return territories


_TERRITORIES = _territories_of()


def _top(shares: Mapping[str, float]) -> str:
    """The country with the largest share; ties go to the later code."""
    best: str | None = None
    top = 0.0
    for c, v in shares.items():
        if best is None or v > top or (v == top and c > best):
            best, top = c, v
    if best is None:
        raise ValueError("no shares")
    return best


_WEIGHT = attrgetter("weight")


def _heaviest(readings: Iterable[Reading]) -> Reading | None:
    """The first of the heaviest readings (as ``max`` by weight), or None."""
    best = None
    for r in readings:
        if best is None or r.weight > best.weight:
            best = r
    return best


@dataclass
class Group:
    """The mentions that name one place, in text order: the first, then those that
    qualify it ("Perth" then "Scotland") or repeat it."""

    mentions: list[Mention] = field(default_factory=list)

    @property
    def readings(self) -> list[Reading]:
        return [r for m in self.mentions for r in m.readings]

    def countries(self) -> set[str]:
        return {r.place.cc for r in self.readings if r.place.cc}

    def has_point(self) -> bool:
        return any(m.is_point for m in self.mentions)

    def is_region(self) -> bool:
        """Only world regions ("Southeast Asia"): no country."""
        for m in self.mentions:
            for r in m.readings:
                if r.place.kind != "region":
                    return False
        return True


@dataclass(frozen=True)
class Weighed:
    """One place of the text, weighed.

    group: the place's own mentions.
    qualifiers: the mentions that qualify the whole text (one flag or postcode).
    dist: share of each country (ISO 3166-1 alpha-2) in the place's readings,
        summing to 1; empty when no reading has a country.
    kept: for each mention of ``mentions`` (the group's, then the qualifiers), in
        order, its readings consistent with the place's containers: "Perth" next
        to "Scotland" keeps only Perth, Scotland.
    """

    group: Group
    qualifiers: tuple[Mention, ...]
    dist: dict[str, float]
    kept: list[list[Reading]]

    @property
    def mentions(self) -> list[Mention]:
        return self.group.mentions + list(self.qualifiers)

    def readings(self) -> Iterator[Reading]:
        """Every kept reading, mention by mention."""
        return (r for rs in self.kept for r in rs)

    def best_country(self) -> str:
        return _top(self.dist)

    def top_share(self) -> float:
        return max(self.dist.values())


# -- 1. grouping --------------------------------------------------------------
def group_places(mentions: Sequence[Mention]) -> tuple[list[Group], list[Mention]]:
    """Split mentions into places; return the places and the text-wide qualifiers.

    One flag or postcode (or several of one country) qualifies the whole text;
    flags of several countries are places of their own.
    """
    marks: list[Mention] = []
    rest: list[Mention] = []
    for m in mentions:
        (marks if m.source in ("flag", "postcode") else rest).append(m)
    qualifiers: list[Mention] = []
    if not marks or len({r.place.cc for m in marks for r in m.readings}) <= 1:
        qualifiers = marks
    else:
        rest = marks + rest
    groups: list[Group] = []
    for m in rest:
        if not groups:
            groups.append(Group([m]))
            continue
        joined = _joined(groups[-1], m)
        if joined is not None:
            groups[-1].mentions.append(joined)
        elif all(r.origin in ("postal", "sub_code") for r in m.readings):
            continue  # an abbreviation qualifies what precedes it; one that fits nothing is noise
        else:
            groups.append(Group([m]))
    return groups, qualifiers


def _joined(g: Group, m: Mention) -> Mention | None:
    """``m`` narrowed to the readings by which it joins place ``g``, or None.

    It joins as a container of the place (a country or subdivision it lies in),
    or as another name of a place already read.
    """
    containers = _containers_of(g, m)
    if containers:
        return m.with_readings(containers)
    gids = {r.place.id for r in g.readings}
    same = [r for r in m.readings if r.place.id in gids]
    if same:
        return m.with_readings(same)
    return None


def _containers_of(g: Group, m: Mention) -> list[Reading]:
    """The readings of ``m`` that contain place ``g``: in one of its countries (or their
    sovereigns) and, for a subdivision after a city, the city's subdivision."""
    if m.source == "flag":
        return []
    countries = g.countries()
    countries |= {SOVEREIGN.get(c, c) for c in countries}
    containers = [r for r in m.readings if _is_container(r) and r.place.cc in countries]
    if not any(r.place.kind == "subdivision" for r in containers):
        return containers
    city_subs = {p.place.sub for p in g.readings if p.place.kind == "city"}
    has_point = g.has_point()
    return [
        r
        for r in containers
        if r.place.kind != "subdivision" or not has_point or r.place.sub in city_subs
    ]


# -- 2. weighing --------------------------------------------------------------
def country_shares(readings: Iterable[Reading]) -> dict[str, float]:
    """Share of each country in a mention's readings.

    A country counts with its heaviest reading, not the sum of them: a dozen
    villages called San Francisco do not make one city. Cities weigh by
    population times the square root of how many names GeoNames knows them by
    (relative to a typical ``FAME_TYPICAL``): size and fame, as a reader would
    weigh them (Barcelona, Spain over Barcelona, Venezuela).
    """
    d: dict[str, float] = {}
    for r in readings:
        place = r.place
        cc = place.cc
        if cc:
            w = r.weight
            if r.similarity != 1.0:
                w *= r.similarity**SIMILARITY_POWER
            if place.kind == "city":
                w *= _fame_factor(place.fame)
            # The heaviest reading, as ``max(d.get(cc, 0.0), w)``.
            old = d.get(cc)
            if old is None:
                d[cc] = w if w > 0.0 else 0.0
            elif w > old:
                d[cc] = w
    total = sum(d.values())
    if not total > 0:
        return {}
    return {c: v / total for c, v in d.items()}


@lru_cache(maxsize=4096)
def _fame_factor(fame: int) -> float:
    """How much a city's fame adds to its weight (see ``country_shares``)."""
    return math.sqrt((1 + fame) / (1 + FAME_TYPICAL))


def weigh(group: Group, qualifiers: Sequence[Mention]) -> Weighed:
    """The country distribution of one place, and each mention's consistent readings."""
    if len(group.mentions) == 1 and not qualifiers:
        # One mention keeps all its readings, container or not.
        kept = [group.mentions[0].readings]
        return Weighed(group, (), _combine(kept), kept)
    mentions = group.mentions + list(qualifiers)
    containers = [m.is_container for m in mentions]
    if True in containers:
        allowed_cc, allowed_sub = _container_constraints(
            [m for m, c in zip(mentions, containers, strict=True) if c]
        )
        kept = [
            m.readings if c else _consistent(m.readings, allowed_cc, allowed_sub)
            for m, c in zip(mentions, containers, strict=True)
        ]
    else:
        kept = [m.readings for m in mentions]
    return Weighed(group, tuple(qualifiers), _combine(kept), kept)


def _container_constraints(containers: list[Mention]) -> tuple[set[str] | None, set[str]]:
    """Countries (None: any) and subdivisions the place's containers allow.

    Each container narrows the countries, unless that would leave none; a
    territory is allowed by its sovereign ("Hong Kong, China"). A container read
    mainly as a subdivision or area allows its subdivisions.
    """
    allowed_cc: set[str] | None = None
    allowed_sub: set[str] = set()
    for m in containers:
        ccs = {r.place.cc for r in m.readings if r.place.cc}
        for sovereign in list(ccs):
            ccs.update(_TERRITORIES.get(sovereign, ()))
        if ccs:
            allowed_cc = ccs if allowed_cc is None else (allowed_cc & ccs) or allowed_cc
        heaviest = max(m.readings, key=_WEIGHT)
        if heaviest.place.kind in ("subdivision", "area"):
            allowed_sub |= {r.place.sub for r in m.readings if r.place.kind == "subdivision"}
    return allowed_cc, allowed_sub


def _consistent(
    readings: list[Reading], allowed_cc: set[str] | None, allowed_sub: set[str]
) -> list[Reading]:
    """The readings inside the allowed countries and subdivisions (all, if none is)."""
    if allowed_cc is not None:
        readings = [r for r in readings if r.place.cc in allowed_cc] or readings
    if allowed_sub:
        readings = [r for r in readings if r.place.sub in allowed_sub] or readings
    return readings


def _combine(kept: list[list[Reading]]) -> dict[str, float]:
    """Multiply the mentions' country shares, skipping a mention that would leave none."""
    dist: dict[str, float] = {}
    for rs in kept:
        d = country_shares(rs)
        if not d:
            continue
        # Territories inherit their sovereign's qualifier: "Hong Kong, China".
        for terr in dist:
            sov = SOVEREIGN.get(terr)
            if sov is not None and sov in d and terr not in d:
                d[terr] = d[sov]
        if not dist:
            dist = d
        else:
            merged = {c: dist[c] * d[c] for c in dist if c in d}
            if sum(merged.values()) > 0:
                dist = merged
        total = sum(dist.values())
        if total != 1.0:  # dividing by 1 changes no share
            dist = {c: v / total for c, v in dist.items()}
    return dist


# -- 3. places that are not places of their own -------------------------------
def drop_minor_places(places: list[Weighed]) -> list[Weighed]:
    """Drop places that say nothing next to the others (never all of them)."""
    if len(places) < 2:
        return places
    for step in (_drop_ordinary_words, _drop_nationalities, _drop_vague, _drop_strays):
        if len(places) > 1:
            places = step(places)
    return places


def strength(w: Weighed) -> float:
    """How surely the place's text is meant as a place at all (the best prior of its
    mentions, ``mentions.place_prior``)."""
    return max(m.prior for m in w.group.mentions)


def _drop_ordinary_words(places: list[Weighed]) -> list[Weighed]:
    """A place read from an ordinary word ("city" in "Ibadan, the city of dreams")
    does not stand beside a place named clearly: only places of comparable strength
    remain, so a weak reading never turns a clear answer into several countries."""
    best = max(strength(w) for w in places)
    return [w for w in places if strength(w) >= COMPARABLE_PRIOR * best]


def _drop_nationalities(places: list[Weighed]) -> list[Weighed]:
    """A nationality word next to a place is who the person is, not where
    ("proud Brazilian in Lisbon"): it qualifies, it does not add a place."""
    placed = [w for w in places if not all(r.origin == "adjective" for r in w.readings())]
    return placed or places


def _drop_vague(places: list[Weighed]) -> list[Weighed]:
    """A part that could be anywhere ("Centro": a region in a dozen countries)
    says nothing next to a part that is clear."""
    if not any(w.top_share() >= CLEAR_SHARE for w in places):
        return places
    return [w for w in places if w.top_share() >= VAGUE_SHARE]


def _drop_strays(places: list[Weighed]) -> list[Weighed]:
    """Weak stray places (a word that happens to be a town's name) go when the rest
    of the text names a country or a larger place."""
    strong = [
        w
        for w in places
        if (
            max(r.place.pop for r in w.readings()) >= STRAY_PLACE_POP
            or any(_is_container(r) for r in w.readings())
        )
        and not all(m.source == "fuzzy" for m in w.group.mentions)
    ]
    return strong or places


# -- 4. the answer ------------------------------------------------------------
def decide(query: Query, mentions: list[Mention], fictional: Sequence[str] = ()) -> Resolution:
    """The answer for one text from its mentions (status provisional, confidence unset).

    ``fictional`` are the fictional names found in the text: one that no confirmed
    place explains makes the text fictional ("Hogwarts, Scotland").
    """
    nothing = _nothing_named(query, mentions, fictional)
    if nothing is not None:
        return nothing
    places, reason = _weighed_places(mentions)
    if reason is not None:
        return Resolution(Status.UNMATCHED, reason)
    places = drop_minor_places(places)
    if fictional and not all(_explained(name, places) for name in fictional):
        return Resolution(Status.NOT_A_PLACE, Reason.FICTIONAL, confidence=1.0, score=1.0)
    every = places
    places, by_cue = current_places(places, cue_roles(query, mentions) if len(places) > 1 else {})
    # Sorted: sums over the joint distribution must not depend on the hash seed.
    if len(places) == 1:
        dist = places[0].dist
        joint = {c: dist[c] for c in sorted(dist)}  # the product of one share is the share
    else:
        countries = sorted(set().union(*(w.dist.keys() for w in places)))
        joint = {c: math.prod(w.dist.get(c, 0.0) for w in places) for c in countries}
    several = _several_countries(places, joint)
    if several is not None:
        return several
    former = [w for w in every if w not in places] if places is not every else []
    res = _one_country(query, places, joint, former)
    if by_cue:
        res.reason = Reason.CURRENT_PLACE
    return res


def _nothing_named(
    query: Query, mentions: list[Mention], fictional: Sequence[str]
) -> Resolution | None:
    """The answer for a text that names no place: junk when it is all web or file
    addresses, markup or code, or made of ordinary words and handles whose mentions
    are all ordinary words ("under my desk"); fictional, or no match ("Dunmarrow"),
    when nothing was found."""
    if query.coordinates:  # a point at sea is a place nobody lives: unmatched
        pass
    elif code_text(query) or (all(m.prior < JUNK_PRIOR for m in mentions) and ordinary_text(query)):
        return Resolution(Status.NOT_A_PLACE, Reason.JUNK, confidence=1.0, score=1.0)
    if not mentions:
        if fictional:
            return Resolution(Status.NOT_A_PLACE, Reason.FICTIONAL, confidence=1.0, score=1.0)
        return Resolution(Status.UNMATCHED, Reason.NO_MATCH)
    return None


def _weighed_places(mentions: list[Mention]) -> tuple[list[Weighed], Reason | None]:
    """The places of the text, weighed; or why there is none (world region, no match)."""
    groups, qualifiers = group_places(mentions)
    located = [g for g in groups if not g.is_region()]
    if not located and not qualifiers:
        return [], Reason.WORLD_REGION
    if not located:
        located, qualifiers = [Group(qualifiers)], []
    places = [w for w in map(weigh, located, itertools.repeat(qualifiers)) if w.dist]
    return places, None if places else Reason.NO_MATCH


def _explained(name: str, places: Sequence[Weighed]) -> bool:
    """Whether a real place explains the fictional name's words: a place confirmed by
    a container that fits it ("Avalon, NJ") or a sizeable one ("Atlantis" is also a
    Honduran department, but "Atlantis" alone is found before the cascade)."""
    words = set(name.split())
    for w in places:
        if not any(words & set(m.text.split()) for m in w.group.mentions):
            continue
        confirmed = len(w.group.mentions) > 1 or w.qualifiers
        if confirmed or max(r.place.pop for r in w.readings()) >= STRAY_PLACE_POP:
            return True
    return False


def current_places(
    places: list[Weighed], roles: Mapping[tuple[int, int, str], str]
) -> tuple[list[Weighed], bool]:
    """The places cue words mark as current ("from Tamale, living in Hamburg",
    "Kampala → Berlin"), and whether the cues decided anything. Without a word that
    marks one place as current every place stays, and places in several countries
    go to review."""
    if len(places) < 2:
        return places, False
    marks = []
    for w in places:
        first = w.group.mentions[0]
        marks.append(roles.get((first.part, first.start, first.text), ""))
    if "current" not in marks:
        return places, False  # "from Chennai, working in Singapore" says no more
    kept = [w for w, r in zip(places, marks, strict=True) if r == "current"]
    if len(kept) == len(places):
        return places, False
    return kept, True


def _several_countries(places: list[Weighed], joint: dict[str, float]) -> Resolution | None:
    """Review with one candidate per place when the places' best countries differ and
    no single country explains them all better than ``MULTI_PENALTY`` allows."""
    if len(places) == 1:
        return None  # one place has one best country
    bests = [w.best_country() for w in places]
    distinct = sorted(set(bests), key=bests.index)
    if len(distinct) == 1:
        return None
    multi_score = math.prod(w.top_share() for w in places) * MULTI_PENALTY ** (len(distinct) - 1)
    total = sum(joint.values())
    if total > 0 and multi_score <= joint[_top(joint)]:
        return None
    cands = [candidate(c, w.readings(), w.dist[c]) for w, c in zip(places, bests, strict=True)]
    return Resolution(
        Status.REVIEW,
        Reason.SEVERAL_COUNTRIES,
        candidates=cands[:MAX_CANDIDATES],
        evidence={c: round(v, 4) for c, v in sorted(joint.items())} if total else {},
    )


def _one_country(
    query: Query, places: list[Weighed], joint: dict[str, float], former: Sequence[Weighed] = ()
) -> Resolution:
    total = sum(joint.values())
    top = _top(joint)
    ranked = sorted(joint.items(), key=_neg_share) if len(joint) > 1 else joint.items()
    evidence = {
        c: round(v / total, 4)
        for c, v in itertools.islice(ranked, MAX_CANDIDATES)
        if v / total >= MIN_EVIDENCE_SHARE
    }
    res = Resolution(Status.MATCHED, Reason.CITY, country=top, evidence=evidence)
    fill_in(res, places)
    res.score = evidence_score(joint[top] / total, top, query, places, former)
    every = [r for w in places for rs in w.kept for r in rs]
    res.candidates = [candidate(c, every, evidence[c]) for c in evidence]
    return res


def _neg_share(item: tuple[str, float]) -> float:
    """Sorts (country, share) pairs by share, largest first (a stable sort keeps ties)."""
    return -item[1]


def candidate(cc: str, readings: Iterable[Reading], score: float) -> Candidate:
    """The candidate for country ``cc``: its heaviest city, else its one subdivision."""
    flat = readings if isinstance(readings, list) else list(readings)
    best = None
    for r in flat:
        place = r.place
        if place.kind == "city" and place.cc == cc and (best is None or r.weight > best.weight):
            best = r
    if best:
        p = best.place
        return Candidate(cc, p.sub, p.name, p.lat, p.lon, round(score, 4))
    subs = {r.place.sub for r in flat if r.place.kind == "subdivision" and r.place.cc == cc}
    return Candidate(cc, subs.pop() if len(subs) == 1 else "", "", None, None, round(score, 4))


# -- subdivision, city and reason of a one-country answer ---------------------
@dataclass
class _Findings:
    """What the places say within the chosen country."""

    subs_named: set[str] = field(default_factory=set)  # subdivisions named outright
    points: list[Reading] = field(default_factory=list)  # per place, the city it names
    sources: set[str] = field(default_factory=set)  # stages that found the mentions
    ambiguous_points: bool = False  # a city name shared by several countries
    undetermined: bool = False  # a mention torn between a city and a subdivision


def fill_in(res: Resolution, places: list[Weighed]) -> None:
    """Subdivision, city and reason of a one-country answer (in place)."""
    found = _findings(places, res.country)
    if found.undetermined:
        found.points, found.subs_named = [], set()
    _locate(res, places, found)
    res.reason = _reason(places, found, res.country, res.evidence)


def _in_country(readings: list[Reading], cc: str) -> list[Reading]:
    """Readings in ``cc`` or in one of its territories."""
    if cc not in _TERRITORIES:
        return [r for r in readings if r.place.cc == cc]
    return [r for r in readings if r.place.cc == cc or SOVEREIGN.get(r.place.cc) == cc]


def _findings(places: list[Weighed], top: str) -> _Findings:
    found = _Findings()
    one_place = len(places) == 1
    for w in places:
        group_points = []
        mentions = w.mentions if w.qualifiers else w.group.mentions
        for m, rs in zip(mentions, w.kept, strict=True):
            found.sources.add(m.source)
            rs_c = _in_country(rs, top)
            heaviest = _heaviest(rs_c)
            if heaviest is not None and heaviest.place.kind != "country":
                found.subs_named |= _qualifying_subdivisions(rs, rs_c, heaviest)
            point, split = city_point(rs_c)
            if split:
                found.undetermined = True
                continue
            if point is None:
                if one_place:
                    found.subs_named |= _subdivisions_named(rs_c, heaviest)
                continue
            group_points.append(point)
            # One reading is one country: only several can make the city ambiguous.
            if not found.ambiguous_points and len(rs) > 1:
                found.ambiguous_points = len({r.place.cc for r in rs if r.place.kind == "city"}) > 1
        if group_points:
            found.points.append(max(group_points, key=_WEIGHT))
    return found


def _qualifying_subdivisions(
    readings: list[Reading], in_country: list[Reading], heaviest: Reading | None
) -> set[str]:
    """Subdivisions a container mention names, unless it is mainly the country:
    "Mexico" as a qualifier is the country, not also the State of Mexico."""
    if heaviest is None or heaviest.place.kind == "country":
        return set()
    cont = [r for r in in_country if r.place.kind in ("subdivision", "area") and r.place.sub]
    if cont and all(_is_container(r) for r in readings):
        return {r.place.sub for r in cont}
    return set()


def _subdivisions_named(in_country: list[Reading], heaviest: Reading | None) -> set[str]:
    """Subdivisions named outright by a mention read mainly as a subdivision."""
    if heaviest is None or heaviest.place.kind != "subdivision":
        return set()
    return {
        r.place.sub
        for r in in_country
        if r.place.kind == "subdivision" and r.origin in _SUBDIVISION_NAMES
    }


def _the_city(places: list[Weighed], found: _Findings) -> Place | None:
    """The one city of a one-place text, if its subdivision agrees with those named."""
    if len(places) != 1 or len(found.points) != 1:
        return None
    city = found.points[0].place
    if found.subs_named and city.sub not in found.subs_named:
        return None
    return city


def _locate(res: Resolution, places: list[Weighed], found: _Findings) -> None:
    """City and subdivision of the answer (in place)."""
    city = _the_city(places, found)
    if city is not None:
        res.city, res.lat, res.lon, res.geonameid = city.name, city.lat, city.lon, city.gid
        res.subdivision = city.sub
    if res.city:
        return
    points, subs_named = found.points, found.subs_named
    subs = subs_named or {r.place.sub for r in points}
    if len(places) > 1:
        # Several places: a subdivision only if every place lies in the same one.
        subs = {r.place.sub for r in points}
        if len(points) < len(places):
            subs = set(subs_named) if len(subs_named) == 1 and not points else set()
    if len(subs) == 1:
        res.subdivision = subs.pop()


def _reason(
    places: list[Weighed], found: _Findings, top: str, evidence: Mapping[str, float]
) -> Reason:
    """The reason, most specific evidence first; "ambiguous" when a single name
    leaves the evidence spread over several countries."""
    if len(places) > 1:
        reason = Reason.SAME_COUNTRY_PLACES
    elif "coordinates" in found.sources:
        reason = Reason.COORDINATES
    elif "time_zone" in found.sources:
        reason = Reason.TIME_ZONE
    elif "fuzzy" in found.sources:
        reason = Reason.SPELLING
    elif "flag" in found.sources and not found.points:
        reason = Reason.FLAG
    elif found.points:
        reason = _city_reason(places[0], found)
    elif "postcode" in found.sources:
        reason = Reason.POSTCODE
    else:
        in_top = [r for w in places for r in w.readings() if r.place.cc == top]
        reason = _container_reason(_heaviest(in_top))
    if (
        len(evidence) > 1
        and max(evidence.values()) < AMBIGUOUS_SHARE
        and reason in _SETTLED_BY_ONE_NAME
    ):
        return Reason.AMBIGUOUS
    return reason


def _city_reason(place: Weighed, found: _Findings) -> Reason:
    if any(r.origin == "alias" for r in found.points):
        return Reason.NICKNAME
    if len(place.group.mentions) + len(place.qualifiers) > 1:
        return Reason.CITY_WITH_CONTEXT
    if found.ambiguous_points:
        return Reason.CITY_BY_SIZE
    return Reason.CITY


def _container_reason(heaviest: Reading | None) -> Reason:
    if heaviest is None:
        return Reason.SUBDIVISION
    if heaviest.place.kind == "country":
        return Reason.COUNTRY_CODE if heaviest.origin in ("code2", "code3") else Reason.COUNTRY_NAME
    if heaviest.place.kind == "area":
        return Reason.NAMED_AREA
    if heaviest.origin == "alias":
        return Reason.NICKNAME
    return Reason.SUBDIVISION


def city_point(readings: list[Reading]) -> tuple[Reading | None, bool]:
    """The city a mention names, if it names one; and whether it is torn
    between a city and a subdivision elsewhere in the country.

    A country name is a city only when the city is most of it (Singapore,
    not Kosovo Polje for "Kosovo"). A subdivision named like its capital is
    the city unless the city is under 10% of it (Lisbon and Porto are the
    cities; Quebec is the province). A subdivision named like a city in
    another subdivision wins unless the city is at least half its size;
    between half and the same size, only the country is determined.
    """
    best = None
    others = False
    for r in readings:
        if r.place.kind == "city":
            if best is None or r.weight > best.weight:
                best = r
        else:
            others = True
    if best is None:
        return None, False
    if not others:
        return best, False  # no country and no subdivision of the name
    # A translation is weaker: Finnish "Brasilia" is Brazil, but the city it names is meant.
    countries = [r for r in readings if r.place.kind == "country" and r.origin != "translation"]
    if countries and best.place.pop < CITY_OF_COUNTRY_SHARE * max(c.place.pop for c in countries):
        return None, False
    subs = [
        r
        for r in readings
        if r.place.kind in ("subdivision", "area") and r.origin in ("name", "translation", "alias")
    ]
    if not subs:
        return best, False
    if best.origin == "short":
        return None, False  # "Morelos" is the state, not Ecatepec de Morelos
    return _city_or_subdivision(best, subs)


def _city_or_subdivision(best: Reading, subs: list[Reading]) -> tuple[Reading | None, bool]:
    same = [r.weight for r in subs if r.place.sub == best.place.sub]
    other = [r.weight for r in subs if r.place.sub != best.place.sub]
    if same and best.weight < CAPITAL_SHARE * max(same):
        return None, False
    if other and not same:
        if best.weight < CITY_OVER_SUBDIVISION_SHARE * max(other):
            return None, False
        if best.weight < max(other):
            return None, True
    return best, False


# -- the evidence score -------------------------------------------------------
def evidence_score(
    p: float, country: str, query: Query, places: list[Weighed], former: Sequence[Weighed] = ()
) -> float:
    """Uncalibrated evidence score in (0, 1): the country's joint share ``p``,
    lowered for typos, unexplained words, a bare small town, a nationality word and
    a place that may be an ordinary word. Places the text marks as ``former``
    explain their words."""
    readings = [r for w in places for rs in w.kept for r in rs if r.place.cc == country]
    score = _spelling(p, readings)
    score = _unexplained(score, query, [*places, *former] if former else places)
    best = _heaviest(readings)
    score = _bare_town(score, best, places)
    score = _only_nationality(score, best, readings)
    score *= min(1.0, min(map(strength, places)) / PRIOR_FULL)
    return max(SCORE_FLOOR, min(SCORE_CEILING, score))


def _spelling(score: float, readings: list[Reading]) -> float:
    sims = [r.similarity for r in readings if r.similarity < 1.0]
    if sims:
        score *= min(sims) ** SPELLING_POWER
    return score


def _unexplained(score: float, query: Query, places: list[Weighed]) -> float:
    """Words nobody explained lower the score. Within a part that names the place, a
    stray word is suspicious, an ordinary word of the text's language ("Bergen and
    proud of it") much less so; a whole part nobody explained (a street line, an
    aside) less again."""
    used_in: dict[int, set[str]] = {}  # part → the words its mentions use
    for w in places:
        for m in w.group.mentions:
            used_in.setdefault(m.part, set()).update(m.text.split())
    lang = -1
    for pi, part in enumerate(query.parts):
        used = used_in.get(pi)
        if used is None:
            if not part.street and any(t.key not in STOPWORDS for t in part.tokens):
                score *= LOOSE_PART_FACTOR
            continue
        stray = [t.key for t in part.tokens if t.key not in STOPWORDS and t.key not in used]
        if not stray:
            continue  # a factor of STRAY_WORD_FACTOR ** 0
        if lang < 0 and _any_ordinary(stray):
            lang = text_language(t.orig for p in query.parts for t in p.tokens)
        # Without an ordinary word in any language, every language counts the same.
        count = _stray_count(stray, max(lang, 0))
        score *= STRAY_WORD_FACTOR ** min(count, MAX_STRAY_WORDS)
    return score


def _any_ordinary(words: list[str]) -> bool:
    """Whether some word is an ordinary word of some language."""
    return any(max(word_zipf(w)) >= ORDINARY_WORD_ZIPF for w in words)


def _stray_count(stray: list[str], lang: int) -> float:
    """Unexplained words, an ordinary word of the text's language counting as a share."""
    return sum(
        ORDINARY_STRAY_WEIGHT if word_zipf(w)[lang] >= ORDINARY_WORD_ZIPF else 1.0 for w in stray
    )


def _bare_town(score: float, best: Reading | None, places: list[Weighed]) -> float:
    """A bare town is weaker evidence the smaller it is, and weaker still when met
    only by an alternate name (``best``: the heaviest reading in the country)."""
    if (
        best
        and best.place.kind == "city"
        and len(places) == 1
        and len(places[0].group.mentions) == 1
    ):
        if best.origin == "alt" and best.place.pop < SMALL_ALT_POP:
            score *= SMALL_ALT_FACTOR
        score *= min(1.0, SIZE_BASE + SIZE_SLOPE * math.log10(max(best.place.pop, 1)))
    return score


def _only_nationality(score: float, best: Reading | None, readings: list[Reading]) -> float:
    if best and best.origin == "adjective" and all(r.origin == "adjective" for r in readings):
        score *= ADJECTIVE_FACTOR
    return score
