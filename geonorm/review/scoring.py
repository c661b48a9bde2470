"""Accuracy on a labelled sample: what an analyst checks before trusting a big run.

Definitions. Rows whose true country is given are positives; rows with an
empty truth (no place, several countries, undecidable) are negatives. A row is
*matched* when its status is ``matched``. True positive: matched with the true
country. Precision = TP / matched; recall = TP / positives; F1 their harmonic
mean. At a threshold t, the rows *called* are those given a single country
with confidence ≥ t; coverage at t is TP(t) / positives.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field
from pathlib import Path

from ..batch.formats import open_source, read_columns, read_header
from ..errors import InputError
from ..resolve.calibration import expected_calibration_error, reliability
from ..resolve.resolution import Reason, Resolution, Status
from ..resolve.resolver import DEFAULT_ACCEPT, Resolver

__all__ = ["THRESHOLDS", "ScoreReport", "score_file", "score_rows"]

THRESHOLDS = (0.5, 0.6, 0.7, 0.8, 0.9, 0.95, 0.99)


@dataclass
class ScoreReport:
    rows: int
    positives: int
    accept: float
    matched: int
    true_positives: int
    precision: float
    recall: float
    f1: float
    by_threshold: list[dict] = field(default_factory=list)
    reliability: list[dict] = field(default_factory=list)
    ece: float = 0.0
    confusions: list[dict] = field(default_factory=list)
    target_precision: float | None = None
    threshold_for_target: float | None = None
    coverage_at_target: float | None = None
    subdivision_accuracy: float | None = None
    subdivision_n: int = 0

    def to_dict(self) -> dict:
        return asdict(self)


def _ratio(a: int, b: int) -> float:
    return round(a / b, 4) if b else 0.0


def _called(res: Resolution, t: float) -> bool:
    return bool(res.country) and res.reason != Reason.SEVERAL_COUNTRIES and res.confidence >= t


def score_rows(
    pairs: Sequence[tuple[str, Resolution]],
    *,
    accept: float = DEFAULT_ACCEPT,
    target_precision: float | None = 0.97,
    truth_subdivisions: Sequence[str] | None = None,
) -> ScoreReport:
    """Score (true country, resolution) pairs; see the module docstring for the definitions."""
    positives = sum(1 for truth, _ in pairs if truth)
    matched = [(t, r) for t, r in pairs if r.status == Status.MATCHED]
    tp = sum(1 for t, r in matched if t and r.country == t)
    precision, recall = _ratio(tp, len(matched)), _ratio(tp, positives)
    f1 = round(2 * precision * recall / (precision + recall), 4) if precision + recall else 0.0
    table = []
    for th in sorted({*THRESHOLDS, accept}):
        called = [(t, r) for t, r in pairs if _called(r, th)]
        right = sum(1 for t, r in called if r.country == t)
        table.append(
            {
                "threshold": th,
                "called": len(called),
                "precision": _ratio(right, len(called)),
                "coverage": _ratio(right, positives),
            }
        )
    given = [(t, r) for t, r in pairs if r.country]
    conf = [r.confidence for _, r in given]
    ok = [r.country == t for t, r in given]
    confusions = Counter((t or "-", r.country) for t, r in matched if r.country != t)
    report = ScoreReport(
        rows=len(pairs),
        positives=positives,
        accept=accept,
        matched=len(matched),
        true_positives=tp,
        precision=precision,
        recall=recall,
        f1=f1,
        by_threshold=table,
        reliability=reliability(conf, ok),
        ece=expected_calibration_error(conf, ok),
        confusions=[
            {"truth": a, "given": b, "rows": n} for (a, b), n in confusions.most_common(10)
        ],
        target_precision=target_precision,
    )
    if target_precision is not None:
        for step in range(0, 101):
            th = step / 100
            called = [(t, r) for t, r in pairs if _called(r, th)]
            right = sum(1 for t, r in called if r.country == t)
            if called and right / len(called) >= target_precision:
                report.threshold_for_target, report.coverage_at_target = (
                    th,
                    _ratio(right, positives),
                )
                break
    if truth_subdivisions is not None:
        subs = [
            (s, r)
            for s, (t, r) in zip(truth_subdivisions, pairs)
            if s and r.status == Status.MATCHED and r.country == t
        ]
        report.subdivision_n = len(subs)
        report.subdivision_accuracy = _ratio(sum(r.subdivision == s for s, r in subs), len(subs))
    return report


def score_file(
    path: str | Path,
    column: str,
    truth: str,
    *,
    truth_subdivision: str | None = None,
    accept: float = DEFAULT_ACCEPT,
    target_precision: float | None = 0.97,
    resolver: Resolver | None = None,
    encoding: str = "utf-8",
) -> ScoreReport:
    """Resolve ``column`` of a labelled file and score it against ``truth``."""
    source = open_source(path, encoding=encoding)
    try:
        header = read_header(source)
        for name, what in (
            (column, "--column"),
            (truth, "--truth"),
            (truth_subdivision, "--truth-subdivision"),
        ):
            if name is not None and name not in header:
                raise InputError(
                    f"column {name!r} is not in {source.name}; its columns are: {', '.join(header)}",
                    hint=f"pass the right name with {what}",
                )
        frame = read_columns(source, [c for c in (column, truth, truth_subdivision) if c])
    finally:
        source.cleanup()
    resolver = resolver or Resolver(accept=accept)
    texts = frame.get_column(column).to_list()
    truths = [t.strip().upper() for t in frame.get_column(truth).to_list()]
    results = resolver.resolve_many(texts)
    pairs = [(t, results[x]) for t, x in zip(truths, texts)]
    subs = (
        [s.strip().upper() for s in frame.get_column(truth_subdivision).to_list()]
        if truth_subdivision
        else None
    )
    return score_rows(
        pairs, accept=resolver.accept, target_precision=target_precision, truth_subdivisions=subs
    )
