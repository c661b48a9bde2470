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

from ..batch.answers import count_keys, resolve_keys
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


def _called_at(pairs: Sequence[tuple[str, Resolution]], t: float) -> tuple[int, int]:
    """Rows called at threshold ``t``, and how many of them have the true country."""
    called = [(truth, r) for truth, r in pairs if _called(r, t)]
    return len(called), sum(1 for truth, r in called if r.country == truth)


def _by_threshold(
    pairs: Sequence[tuple[str, Resolution]], accept: float, positives: int
) -> list[dict]:
    table = []
    for th in sorted({*THRESHOLDS, accept}):
        called, right = _called_at(pairs, th)
        table.append(
            {
                "threshold": th,
                "called": called,
                "precision": _ratio(right, called),
                "coverage": _ratio(right, positives),
            }
        )
    return table


def _threshold_for(
    pairs: Sequence[tuple[str, Resolution]], target: float, positives: int
) -> tuple[float | None, float | None]:
    """The lowest threshold (in steps of 0.01) reaching ``target`` precision, and its coverage."""
    for step in range(0, 101):
        th = step / 100
        called, right = _called_at(pairs, th)
        if called and right / called >= target:
            return th, _ratio(right, positives)
    return None, None


def _subdivisions(
    pairs: Sequence[tuple[str, Resolution]], truth_subdivisions: Sequence[str]
) -> tuple[float, int]:
    """Share of matched rows of the right country with the right subdivision, and their count."""
    subs = [
        (s, r)
        for s, (t, r) in zip(truth_subdivisions, pairs, strict=False)
        if s and r.status == Status.MATCHED and r.country == t
    ]
    return _ratio(sum(r.subdivision == s for s, r in subs), len(subs)), len(subs)


def _calibration(pairs: Sequence[tuple[str, Resolution]]) -> tuple[list[dict], float]:
    """Reliability table and ECE over the rows given a country."""
    given = [(t, r) for t, r in pairs if r.country]
    conf = [r.confidence for _, r in given]
    ok = [r.country == t for t, r in given]
    return reliability(conf, ok), expected_calibration_error(conf, ok)


def _confusions(matched: Sequence[tuple[str, Resolution]]) -> list[dict]:
    """The ten commonest (true country, given country) mistakes among matched rows."""
    counts = Counter((t or "-", r.country) for t, r in matched if r.country != t)
    return [{"truth": a, "given": b, "rows": n} for (a, b), n in counts.most_common(10)]


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
    reliability_table, ece = _calibration(pairs)
    report = ScoreReport(
        rows=len(pairs),
        positives=positives,
        accept=accept,
        matched=len(matched),
        true_positives=tp,
        precision=precision,
        recall=recall,
        f1=f1,
        by_threshold=_by_threshold(pairs, accept, positives),
        reliability=reliability_table,
        ece=ece,
        confusions=_confusions(matched),
        target_precision=target_precision,
    )
    if target_precision is not None:
        report.threshold_for_target, report.coverage_at_target = _threshold_for(
            pairs, target_precision, positives
        )
    if truth_subdivisions is not None:
        report.subdivision_accuracy, report.subdivision_n = _subdivisions(pairs, truth_subdivisions)
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
            (column, "`column`"),
            (truth, "`truth`"),
            (truth_subdivision, "`truth_subdivision`"),
        ):
            if name is not None and name not in header:
                raise InputError(
                    f"column {name!r} is not in {source.name}; "
                    f"its columns are: {', '.join(header)}",
                    hint=f"pass the right name with {what}",
                )
        frame = read_columns(source, [c for c in (column, truth, truth_subdivision) if c])
    finally:
        source.cleanup()
    resolver = resolver or Resolver(accept=accept)
    texts = frame.get_column(column).to_list()
    truths = [t.strip().upper() for t in frame.get_column(truth).to_list()]
    answers = resolve_keys(count_keys(texts, resolver), resolver=resolver, accept=resolver.accept)
    pairs = [(t, answers.results[resolver.key(x)]) for t, x in zip(truths, texts, strict=True)]
    subs = (
        [s.strip().upper() for s in frame.get_column(truth_subdivision).to_list()]
        if truth_subdivision
        else None
    )
    return score_rows(
        pairs, accept=resolver.accept, target_precision=target_precision, truth_subdivisions=subs
    )
