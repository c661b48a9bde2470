"""Map evidence scores to calibrated probabilities that the country is right.

Platt scaling (a logistic curve on the logit of the score) fitted on a
labelled file: of answers given confidence 0.9, about 90% should be right.
Three mappings compete: the evidence score as it is, one Platt curve, and one
curve per reason (city by size, spelling, ambiguous …) shrunk towards the
global one; the one with the lowest cross-validated log loss wins. The shipped
parameters live in ``calibration.json`` next
to this module and were fitted on the project's labelled development set;
refit with

    python -m geonorm.review.refit LABELLED.csv --column text --truth country
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field
from functools import lru_cache
from pathlib import Path

from .resolution import Status

__all__ = [
    "CALIBRATION_PATH",
    "Calibration",
    "expected_calibration_error",
    "fit",
    "fit_platt",
    "load_calibration",
    "reliability",
]

CALIBRATION_PATH = Path(__file__).with_name("calibration.json")


def _logit(p: float) -> float:
    p = min(max(p, 1e-6), 1 - 1e-6)
    return math.log(p / (1 - p))


def _sigmoid(x: float) -> float:
    if x >= 0:
        return 1.0 / (1.0 + math.exp(-x))
    e = math.exp(x)
    return e / (1.0 + e)


@dataclass
class Calibration:
    a: float = 1.0
    b: float = 0.0
    fitted_on: str = "identity (not fitted)"
    n: int = 0
    ece_before: float | None = None
    ece_after: float | None = None
    by_reason: dict[str, list[float]] = field(default_factory=dict)
    method: str = "global"  # identity | global | per_reason
    cross_validation: dict = field(default_factory=dict)

    def apply(self, score: float, reason: object = None) -> float:
        if self.method == "identity":
            return min(max(score, 0.0), 1.0)
        a, b = self.by_reason.get(_curve_key(reason), (self.a, self.b))
        return _sigmoid(a * _logit(score) + b)

    def save(self, path: Path = CALIBRATION_PATH) -> None:
        path.write_text(json.dumps(asdict(self), indent=2) + "\n", encoding="utf-8")


# Answers re-ranked by the file prior are bare names shared by several places:
# they share the curve of city_by_size rather than a curve of their own fitted
# on a handful of rows.
_SHARED_CURVE = {"file_prior": "city_by_size"}


def _curve_of(reason: str) -> str:
    return _SHARED_CURVE.get(reason, reason)


@lru_cache(maxsize=256, typed=True)
def _curve_key(reason: object) -> str:
    """The curve of a reason given as a ``Reason`` or as its value (an enum's
    ``value`` is slow to read, and every answer asks)."""
    return _curve_of(str(getattr(reason, "value", reason)))


def load_calibration(path: Path = CALIBRATION_PATH) -> Calibration:
    if not path.exists():
        return Calibration()
    return Calibration(**json.loads(path.read_text(encoding="utf-8")))


def fit_platt(
    scores: Sequence[float],
    correct: Sequence[bool],
    l2: float = 0.01,
    centre: tuple[float, float] = (1.0, 0.0),
) -> tuple[float, float]:
    """Fit p = sigmoid(a * logit(s) + b) by Newton's method on the log loss.

    A ridge of strength ``l2`` pulls (a, b) towards ``centre``.
    """
    xs = [_logit(s) for s in scores]
    ys = [1.0 if c else 0.0 for c in correct]
    a, b = centre
    for _ in range(100):
        ga = gb = haa = hab = hbb = 0.0
        for x, y in zip(xs, ys, strict=True):
            p = _sigmoid(a * x + b)
            w = p * (1 - p)
            ga += (p - y) * x
            gb += p - y
            haa += w * x * x
            hab += w * x
            hbb += w
        ga += l2 * (a - centre[0])
        gb += l2 * (b - centre[1])
        haa += l2
        hbb += l2 + 1e-9
        det = haa * hbb - hab * hab
        if abs(det) < 1e-12:
            break
        da = (hbb * ga - hab * gb) / det
        db = (haa * gb - hab * ga) / det
        a, b = a - da, b - db
        if abs(da) < 1e-9 and abs(db) < 1e-9:
            break
    return a, b


def reliability(
    confidences: Sequence[float], correct: Sequence[bool], bins: int = 10
) -> list[dict]:
    """Equal-width reliability table: per bin the count, mean confidence and accuracy."""
    table = [
        {"low": i / bins, "high": (i + 1) / bins, "n": 0, "conf_sum": 0.0, "right": 0}
        for i in range(bins)
    ]
    for c, ok in zip(confidences, correct, strict=False):
        c = min(max(c, 0.0), 1.0)
        row = table[min(int(c * bins), bins - 1)]
        row["n"] += 1
        row["conf_sum"] += c
        row["right"] += bool(ok)
    out = []
    for row in table:
        n = row["n"]
        out.append(
            {
                "bin": f"{row['low']:.1f}-{row['high']:.1f}",
                "n": n,
                "mean_confidence": round(row["conf_sum"] / n, 4) if n else None,
                "accuracy": round(row["right"] / n, 4) if n else None,
            }
        )
    return out


def expected_calibration_error(
    confidences: Sequence[float], correct: Sequence[bool], bins: int = 10
) -> float:
    """ECE: bin-weighted mean |accuracy − mean confidence|.

    Naeini et al. 2015, with equal-width bins.
    """
    n = len(confidences)
    if not n:
        return 0.0
    total = 0.0
    for row in reliability(confidences, correct, bins):
        if row["n"]:
            total += row["n"] / n * abs(row["accuracy"] - row["mean_confidence"])
    return round(total, 4)


def _log_loss(probs: Sequence[float], correct: Sequence[bool]) -> float:
    return -sum(
        math.log(max(1e-6, p if y else 1 - p)) for p, y in zip(probs, correct, strict=True)
    ) / max(1, len(probs))


def _fit_curves(scores, correct, reasons, method: str, shrink: float) -> Calibration:
    if method == "identity":
        return Calibration(method="identity")
    a, b = fit_platt(scores, correct)
    by_reason: dict[str, list[float]] = {}
    if method == "per_reason":
        groups: dict[str, list[int]] = {}
        for i, reason in enumerate(reasons):
            groups.setdefault(reason, []).append(i)
        for reason, idx in sorted(groups.items()):
            ra, rb = fit_platt(
                [scores[i] for i in idx], [correct[i] for i in idx], l2=shrink, centre=(a, b)
            )
            by_reason[reason] = [round(ra, 4), round(rb, 4)]
    return Calibration(a=round(a, 4), b=round(b, 4), by_reason=by_reason, method=method)


def fit(
    results: dict,
    labelled: Sequence[tuple[str, str]],
    name: str = "",
    shrink: Sequence[float] = (4.0, 16.0, 64.0),
    folds: int = 5,
) -> Calibration:
    """Choose and fit the confidence mapping on labelled rows.

    Candidates: the evidence score as it is (identity), one Platt curve, and one
    curve per reason shrunk towards the global one by each strength in ``shrink``
    (a stronger pull keeps a reason seen on few, easy rows from a curve as steep as
    a step). The one with the lowest log loss in ``folds``-fold cross-validation is
    fitted on all rows; its cross-validated figures are recorded, honest ones for
    unseen data.
    """
    import random

    scores, correct, reasons = [], [], []
    for text, truth in labelled:
        res = results[text]
        if res.country and res.status in (Status.MATCHED, Status.REVIEW):
            scores.append(res.score)
            correct.append(res.country == truth)
            reasons.append(_curve_of(res.reason.value))
    order = list(range(len(scores)))
    random.Random(0).shuffle(order)
    candidates = [("identity", 0.0), ("global", 0.0)] + [("per_reason", k) for k in shrink]
    cv: dict[tuple[str, float], tuple[float, float]] = {}
    for method, strength in candidates:
        held = [0.0] * len(scores)
        for f in range(folds):
            test = set(order[f::folds])
            train = [i for i in order if i not in test]
            cal = _fit_curves(
                [scores[i] for i in train],
                [correct[i] for i in train],
                [reasons[i] for i in train],
                method,
                strength,
            )
            for i in test:
                held[i] = cal.apply(scores[i], reasons[i])
        cv[(method, strength)] = (
            _log_loss(held, correct),
            expected_calibration_error(held, correct),
        )
    best = min(cv, key=lambda m: (cv[m][0], m))
    cal = _fit_curves(scores, correct, reasons, best[0], best[1])
    cal.fitted_on, cal.n = name, len(scores)
    cal.ece_before = expected_calibration_error(scores, correct)
    cal.ece_after = expected_calibration_error(
        [cal.apply(s, r) for s, r in zip(scores, reasons, strict=True)], correct
    )
    cal.cross_validation = {
        (m if m != "per_reason" else f"per_reason(shrink={k:g})"): {
            "log_loss": round(v[0], 4),
            "ece": round(v[1], 4),
        }
        for (m, k), v in cv.items()
    }
    return cal
