"""Refit the confidence calibration on a labelled CSV.

    python -m geonorm.review.refit LABELLED.csv --column text --truth country

Resolves every text with the neutral curve (a = 1, b = 0), so the fit sees the
raw evidence scores (file prior included), chooses and fits the mapping
(``calibration.fit``) and writes it to ``calibration.json`` (or ``--out``).
"""

from __future__ import annotations

import argparse
import csv
import json
from collections.abc import Sequence
from dataclasses import asdict
from pathlib import Path

from ..batch.answers import count_keys, resolve_keys
from ..resolve.calibration import CALIBRATION_PATH, Calibration, fit
from ..resolve.resolver import Resolver

__all__ = ["main"]


def main(argv: Sequence[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description="Refit the confidence calibration on a labelled CSV.")
    ap.add_argument("labelled")
    ap.add_argument("--column", default="text")
    ap.add_argument("--truth", default="country")
    ap.add_argument("--out", default=str(CALIBRATION_PATH))
    args = ap.parse_args(argv)
    with open(args.labelled, encoding="utf-8", newline="") as fh:
        rows = list(csv.DictReader(fh))
    resolver = Resolver(calibration=Calibration())
    texts = [r[args.column] for r in rows]
    # The same answer pipeline as every other entry point (file prior included).
    answers = resolve_keys(count_keys(texts, resolver), resolver=resolver)
    results = {t: answers.results[resolver.key(t)] for t in texts}
    cal = fit(
        results, [(r[args.column], r[args.truth]) for r in rows], name=Path(args.labelled).name
    )
    cal.save(Path(args.out))
    print(json.dumps(asdict(cal), indent=2))


if __name__ == "__main__":
    main()
