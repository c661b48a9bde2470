"""Accuracy floors on the labelled development set (plain assertions, no timings).

The floors sit a little below the measured figures so that a regression fails
the suite; the measured figures are in the README.
"""

from __future__ import annotations

import csv
from collections import Counter
from pathlib import Path

import pytest

from geonorm.batch.answers import count_keys, resolve_keys
from geonorm.resolve.calibration import expected_calibration_error

DEVSET = Path(__file__).parent / "data" / "locations_dev.csv"
NOT_A_PLACE_KINDS = {"junk", "empty_like", "fictional"}


@pytest.fixture(scope="module")
def scored(resolver):
    rows = list(csv.DictReader(open(DEVSET, encoding="utf-8", newline="")))
    answers = resolve_keys(count_keys([r["text"] for r in rows], resolver), resolver=resolver)
    return [(r, answers.results[resolver.key(r["text"])]) for r in rows]


def test_precision_and_recall_of_matched(scored):
    tp = sum(
        1
        for g, r in scored
        if r.status.value == "matched" and r.country == g["country"] and g["country"]
    )
    fp = sum(1 for g, r in scored if r.status.value == "matched" and r.country != g["country"])
    positives = sum(1 for g, _ in scored if g["country"])
    assert tp / (tp + fp) >= 0.97
    assert tp / positives >= 0.88


def test_not_a_place_recall(scored):
    kinds = [(g, r) for g, r in scored if g["kind"] in NOT_A_PLACE_KINDS]
    assert sum(r.status.value == "not_a_place" for _, r in kinds) / len(kinds) >= 0.90


def test_subdivision_accuracy(scored):
    hits = [
        (g, r)
        for g, r in scored
        if g["subdivision"] and r.status.value == "matched" and r.country == g["country"]
    ]
    assert sum(r.subdivision == g["subdivision"] for g, r in hits) / len(hits) >= 0.90


def test_every_kind_mostly_right(scored):
    right, total = Counter(), Counter()
    for g, r in scored:
        total[g["kind"]] += 1
        ok = (
            (r.status.value == "matched" and r.country == g["country"])
            if g["country"]
            else r.status.value != "matched"
        )
        right[g["kind"]] += ok
    low = {k: f"{right[k]}/{total[k]}" for k in total if right[k] / total[k] < 0.75}
    assert low == {}


def test_calibration_error_is_small(scored):
    given = [(g, r) for g, r in scored if r.country]
    ece = expected_calibration_error(
        [r.confidence for _, r in given], [r.country == g["country"] for g, r in given]
    )
    assert ece <= 0.05
