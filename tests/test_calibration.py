"""Calibration maths on small examples worked by hand."""

from __future__ import annotations

import math
import random

from geonorm.resolve.calibration import (
    Calibration,
    expected_calibration_error,
    fit_platt,
    reliability,
)


def test_ece_hand_computed():
    # Two bins: [0.9, 1.0) holds 0.9, 0.9 with 1 of 2 right → |0.5 - 0.9| = 0.4, weight 2/4;
    # [0.2, 0.3) holds 0.2, 0.2 with 0 of 2 right → |0 - 0.2| = 0.2, weight 2/4.
    # ECE = 0.5 * 0.4 + 0.5 * 0.2 = 0.3 (computed by hand).
    assert math.isclose(
        expected_calibration_error([0.9, 0.9, 0.2, 0.2], [True, False, False, False]), 0.3
    )


def test_reliability_bins():
    table = reliability([0.05, 0.95, 0.97], [False, True, True])
    assert table[0] == {"bin": "0.0-0.1", "n": 1, "mean_confidence": 0.05, "accuracy": 0.0}
    assert table[9]["n"] == 2 and table[9]["accuracy"] == 1.0


def test_platt_recovers_a_known_curve():
    # Simulated (seeded): truth is p = sigmoid(2·logit(s) − 1); the fit should find a ≈ 2, b ≈ −1.
    rng = random.Random(7)
    scores, correct = [], []
    for _ in range(4000):
        s = rng.uniform(0.02, 0.98)
        x = 2 * math.log(s / (1 - s)) - 1
        scores.append(s)
        correct.append(rng.random() < 1 / (1 + math.exp(-x)))
    a, b = fit_platt(scores, correct, l2=0.0)
    assert abs(a - 2) < 0.15 and abs(b + 1) < 0.15


def test_identity_calibration_and_reason_curves():
    cal = Calibration()
    assert math.isclose(cal.apply(0.8), 0.8)
    cal = Calibration(by_reason={"spelling": [1.0, -1.0]})
    assert cal.apply(0.5, "spelling") < 0.5 == cal.apply(0.5, "city")
