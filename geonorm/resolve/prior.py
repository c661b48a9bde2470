"""The file prior: the countries of one file lean its ambiguous names.

A file of Venezuelans that says "Valencia" most likely means Valencia,
Venezuela. The countries of the confidently matched rows, weighted by row
count, form a prior (``file_prior``); each ambiguous answer's per-country
evidence is multiplied by it, tempered by ``PRIOR_EXPONENT`` (``reconsider``).

These functions never set an answer's status: the caller settles each changed
answer with ``resolution.settle`` and its accept threshold.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Mapping, MutableMapping
from dataclasses import replace

from .calibration import Calibration
from .resolution import Candidate, Reason, Resolution, Status, status_at
from .tuning import (
    PRIOR_EXPONENT,
    PRIOR_FLOOR,
    PRIOR_MIN_CONFIDENCE,
    PRIOR_MIN_ROWS,
    SCORE_CEILING,
    SCORE_FLOOR,
)

__all__ = ["eligible", "file_prior", "reconsider", "rerank"]


def _status(res: Resolution, accept: float | None) -> Status:
    """The answer's status, or the one ``settle`` would give it at ``accept`` (unchanged)."""
    return res.status if accept is None else status_at(res, accept)


def file_prior(
    results: Mapping[str, Resolution],
    counts: Mapping[str, int],
    min_rows: int = PRIOR_MIN_ROWS,
    accept: float | None = None,
) -> dict[str, float]:
    """Country shares among confidently matched rows, by row count (Laplace-smoothed).

    Answers re-ranked by a prior do not feed it. Empty when fewer than
    ``min_rows`` rows qualify: a small file says too little. With ``accept``,
    "matched" is judged at that threshold rather than read from the answers.
    """
    tally: Counter[str] = Counter()
    for key, n in counts.items():
        res = results[key]
        if (
            _status(res, accept) is Status.MATCHED
            and res.confidence >= PRIOR_MIN_CONFIDENCE
            and res.reason is not Reason.FILE_PRIOR
        ):
            tally[res.country] += n
    total = sum(tally.values())
    if total < min_rows:
        return {}
    n_countries = max(1, len(tally))
    return {c: (n + 1) / (total + n_countries) for c, n in tally.items()}


def eligible(res: Resolution, accept: float | None = None) -> bool:
    """Whether the prior may re-rank an answer: an ambiguous name or a city chosen by
    size, matched or in review (at ``accept``, if given), with evidence for at least
    two countries."""
    return (
        len(res.evidence) >= 2
        and res.reason in (Reason.AMBIGUOUS, Reason.CITY_BY_SIZE)
        and _status(res, accept) in (Status.REVIEW, Status.MATCHED)
    )


def reconsider(res: Resolution, prior: Mapping[str, float], calibration: Calibration) -> Resolution:
    """Re-rank one answer's per-country evidence with the file's ``prior``.

    Each country's evidence is multiplied by (prior share + ``PRIOR_FLOOR``) to
    the power ``PRIOR_EXPONENT``. When that changes the country, or makes it
    surer, a new answer is returned (reason ``file_prior``, rebuilt from the
    candidate of the new country, confidence from ``calibration``); else ``res``
    itself. The status is left as it was.
    """
    if not res.evidence:
        return res
    weighted = {
        c: v * (prior.get(c, 0.0) + PRIOR_FLOOR) ** PRIOR_EXPONENT for c, v in res.evidence.items()
    }
    total = sum(weighted.values())
    top = max(weighted, key=lambda c: (weighted[c], c))
    p_new, p_old = weighted[top] / total, res.evidence.get(res.country, 0.0)
    if top == res.country and p_new <= p_old:
        return res
    evidence = {c: round(v / total, 4) for c, v in weighted.items()}
    # The candidates carry the re-ranked shares, so a reviewer sees the same
    # weighing as the answer: the new country first.
    candidates = sorted(
        (replace(c, score=evidence.get(c.country, 0.0)) for c in res.candidates),
        key=lambda c: -c.score,
    )
    new = replace(
        res, country=top, evidence=evidence, candidates=candidates, reason=Reason.FILE_PRIOR
    )
    if top != res.country:
        cand = next((c for c in res.candidates if c.country == top), Candidate(top))
        new.subdivision, new.city, new.lat, new.lon = (
            cand.subdivision,
            cand.city,
            cand.lat,
            cand.lon,
        )
        new.geonameid = None
    new.score = max(SCORE_FLOOR, min(SCORE_CEILING, res.score * p_new / max(p_old, SCORE_FLOOR)))
    new.confidence = round(calibration.apply(new.score, Reason.FILE_PRIOR), 4)
    return new


def rerank(
    results: MutableMapping[str, Resolution],
    counts: Mapping[str, int],
    calibration: Calibration,
    accept: float | None = None,
) -> dict[str, Resolution]:
    """Re-rank the eligible answers of one file with its prior, in place.

    Returns the answers that changed, by key; settle each of them with
    ``resolution.settle`` (their status is still the one they had). With
    ``accept``, the answers' statuses are judged as ``settle`` would set them at
    that threshold, so answers read from a cache under another threshold count
    as they will be written.
    """
    prior = file_prior(results, counts, accept=accept)
    changed: dict[str, Resolution] = {}
    if not prior:
        return changed
    for key, res in results.items():
        if eligible(res, accept):
            new = reconsider(res, prior, calibration)
            if new is not res:
                changed[key] = new
    results.update(changed)
    return changed
