"""The result of resolving one distinct string, and the reason vocabulary."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from enum import Enum
from typing import Any

__all__ = ["Candidate", "Reason", "Resolution", "Status", "settle", "status_at"]


class Status(str, Enum):
    MATCHED = "matched"
    REVIEW = "review"
    UNMATCHED = "unmatched"
    NOT_A_PLACE = "not_a_place"


class Reason(str, Enum):
    """How a resolution was decided. Documented in the README."""

    EMPTY = "empty"
    PLACEHOLDER = "placeholder"
    JUNK = "junk"
    FICTIONAL = "fictional"
    WORLD_REGION = "world_region"
    FLAG = "flag"
    COUNTRY_NAME = "country_name"
    COUNTRY_CODE = "country_code"
    SUBDIVISION = "subdivision"
    NAMED_AREA = "named_area"
    NICKNAME = "nickname"
    CITY = "city"
    CITY_WITH_CONTEXT = "city_with_context"
    CITY_BY_SIZE = "city_by_size"
    POSTCODE = "postcode"
    COORDINATES = "coordinates"
    TIME_ZONE = "time_zone"
    SPELLING = "spelling"
    SAME_COUNTRY_PLACES = "same_country_places"
    CURRENT_PLACE = "current_place"
    SEVERAL_COUNTRIES = "several_countries"
    AMBIGUOUS = "ambiguous"
    FILE_PRIOR = "file_prior"
    NO_MATCH = "no_match"
    REVIEWED = "reviewed"
    REMOTE_AGREES = "remote_agrees"
    REMOTE_DIFFERS = "remote_differs"
    REMOTE_FOUND = "remote_found"


@dataclass(frozen=True)
class Candidate:
    country: str
    subdivision: str = ""
    city: str = ""
    lat: float | None = None
    lon: float | None = None
    score: float = 0.0

    def label(self) -> str:
        return " / ".join(x for x in (self.city, self.subdivision, self.country) if x) or "-"


@dataclass
class Resolution:
    status: Status
    reason: Reason
    country: str = ""
    subdivision: str = ""
    city: str = ""
    lat: float | None = None
    lon: float | None = None
    geonameid: int | None = None
    confidence: float = 0.0
    score: float = 0.0  # the uncalibrated evidence score the confidence is fitted on
    candidates: list[Candidate] = field(default_factory=list)
    # Per-country evidence, kept so a file-level prior can re-rank later.
    evidence: dict[str, float] = field(default_factory=dict)
    source: str = ""  # the remote service that contributed, if one did

    @property
    def reason_text(self) -> str:
        """The reason as written in files: ``remote_agrees:team-geocoder`` when a service helped."""
        return f"{self.reason.value}:{self.source}" if self.source else self.reason.value

    def to_dict(self) -> dict[str, Any]:
        d = asdict(self)
        d["status"] = self.status.value
        d["reason"] = self.reason.value
        return d

    @classmethod
    def from_override(cls, d: dict[str, Any]) -> Resolution:
        """A person's decision as a resolution: it wins over every stage."""
        if d.get("not_a_place"):
            return cls(Status.NOT_A_PLACE, Reason.REVIEWED, confidence=1.0, score=1.0)
        return cls(
            Status.MATCHED,
            Reason.REVIEWED,
            d["country"],
            d.get("subdivision") or "",
            d.get("city") or "",
            d.get("lat"),
            d.get("lon"),
            d.get("geonameid"),
            1.0,
            1.0,
            [
                Candidate(
                    d["country"],
                    d.get("subdivision") or "",
                    d.get("city") or "",
                    d.get("lat"),
                    d.get("lon"),
                    1.0,
                )
            ],
            {d["country"]: 1.0},
        )


# Reasons that always need a person, whatever the confidence.
_ALWAYS_REVIEW = frozenset({Reason.SEVERAL_COUNTRIES, Reason.REMOTE_DIFFERS})


def status_at(res: Resolution, accept: float) -> Status:
    """The status an answer has at threshold ``accept`` (the rule ``settle`` applies).

    The one place where ``matched`` and ``review`` are decided: an answer with a
    country is ``matched`` when its confidence reaches ``accept``, else ``review``;
    several countries and a remote service that disagrees always go to review; a
    person's decision is final; no country is ``unmatched``; ``not_a_place`` stays.
    """
    if res.status is Status.NOT_A_PLACE:
        return Status.NOT_A_PLACE
    if res.reason in _ALWAYS_REVIEW:
        return Status.REVIEW
    if res.reason is Reason.REVIEWED:
        return Status.MATCHED
    if res.country:
        return Status.MATCHED if res.confidence >= accept else Status.REVIEW
    return Status.UNMATCHED


def settle(res: Resolution, accept: float) -> Resolution:
    """Set the status of an answer to ``status_at(res, accept)`` (in place)."""
    res.status = status_at(res, accept)
    return res
