"""Map evidence scores to calibrated probabilities that the country is right.

Platt scaling (a logistic curve on the logit of the score) fitted on a
labelled file: of answers given confidence 0.9, about 90% should be right.
The shipped parameters live in ``calibration.json`` next to this module and
were fitted on the project's labelled development set; refit with

    python -m geonorm.calibration LABELLED.csv --column text --truth country
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field
from pathlib import Path

__all__ = ["Calibration", "load_calibration", "fit_platt", "reliability", "expected_calibration_error"]

_PATH = Path(__file__).with_name("calibration.json")


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
    notes: dict = field(default_factory=dict)

    def apply(self, score: float, reason: object = None) -> float:
        return _sigmoid(self.a * _logit(score) + self.b)

    def save(self, path: Path = _PATH) -> None:
        path.write_text(json.dumps(asdict(self), indent=2) + "\n", encoding="utf-8")


def load_calibration(path: Path = _PATH) -> Calibration:
    if not path.exists():
        return Calibration()
    return Calibration(**json.loads(path.read_text(encoding="utf-8")))


def fit_platt(scores: Sequence[float], correct: Sequence[bool], l2: float = 0.01) -> tuple[float, float]:
    """Fit p = sigmoid(a * logit(s) + b) by Newton's method on the log loss (small ridge)."""
    xs = [_logit(s) for s in scores]
    ys = [1.0 if c else 0.0 for c in correct]
    a, b = 1.0, 0.0
    for _ in range(100):
        ga = gb = haa = hab = hbb = 0.0
        for x, y in zip(xs, ys):
            p = _sigmoid(a * x + b)
            w = p * (1 - p)
            ga += (p - y) * x
            gb += p - y
            haa += w * x * x
            hab += w * x
            hbb += w
        ga += l2 * (a - 1.0)
        haa += l2
        hbb += 1e-9
        det = haa * hbb - hab * hab
        if abs(det) < 1e-12:
            break
        da = (hbb * ga - hab * gb) / det
        db = (haa * gb - hab * ga) / det
        a, b = a - da, b - db
        if abs(da) < 1e-9 and abs(db) < 1e-9:
            break
    return a, b


def reliability(confidences: Sequence[float], correct: Sequence[bool], bins: int = 10) -> list[dict]:
    """Equal-width reliability table: per bin the count, mean confidence and accuracy."""
    table = [{"low": i / bins, "high": (i + 1) / bins, "n": 0, "conf_sum": 0.0, "right": 0} for i in range(bins)]
    for c, ok in zip(confidences, correct):
        c = min(max(c, 0.0), 1.0)
        row = table[min(int(c * bins), bins - 1)]
        row["n"] += 1
        row["conf_sum"] += c
        row["right"] += bool(ok)
    out = []
    for row in table:
        n = row["n"]
        out.append({"bin": f"{row['low']:.1f}-{row['high']:.1f}", "n": n,
                    "mean_confidence": round(row["conf_sum"] / n, 4) if n else None,
                    "accuracy": round(row["right"] / n, 4) if n else None})
    return out


def expected_calibration_error(confidences: Sequence[float], correct: Sequence[bool], bins: int = 10) -> float:
    """ECE: bin-weighted mean |accuracy − mean confidence| (Naeini et al. 2015, equal-width bins)."""
    n = len(confidences)
    if not n:
        return 0.0
    total = 0.0
    for row in reliability(confidences, correct, bins):
        if row["n"]:
            total += row["n"] / n * abs(row["accuracy"] - row["mean_confidence"])
    return round(total, 4)


def main(argv: Sequence[str] | None = None) -> None:
    import argparse
    import csv

    from .resolver import Resolver
    from .resolution import Status

    ap = argparse.ArgumentParser(description="Refit the confidence calibration on a labelled CSV.")
    ap.add_argument("labelled")
    ap.add_argument("--column", default="text")
    ap.add_argument("--truth", default="country")
    ap.add_argument("--out", default=str(_PATH))
    args = ap.parse_args(argv)
    with open(args.labelled, encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh))
    resolver = Resolver(calibration=Calibration())
    texts = [r[args.column] for r in rows]
    results = resolver.resolve_many(texts)
    scores, correct = [], []
    for r in rows:
        res = results[r[args.column]]
        if res.country and res.status in (Status.MATCHED, Status.REVIEW):
            scores.append(res.score)
            correct.append(res.country == r[args.truth])
    a, b = fit_platt(scores, correct)
    cal = Calibration(a=round(a, 4), b=round(b, 4), fitted_on=Path(args.labelled).name, n=len(scores))
    cal.ece_before = expected_calibration_error(scores, correct)
    cal.ece_after = expected_calibration_error([cal.apply(s) for s in scores], correct)
    cal.save(Path(args.out))
    print(json.dumps(asdict(cal), indent=2))


if __name__ == "__main__":
    main()
