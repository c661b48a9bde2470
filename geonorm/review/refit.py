"""Refit the confidence calibration on one or more labelled CSV files.

    python -m geonorm.review.refit LABELLED.csv [MORE.csv ...] --column text --truth country

Resolves every text with the neutral curve (a = 1, b = 0), so the fit sees the
raw evidence scores (file prior included, each file its own prior, as in a real
run), chooses and fits the mapping on the rows of all files together
(``calibration.fit``, cross-validated) and writes it to ``calibration.json``
(or ``--out``).
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
from ..resolve.resolution import Resolution
from ..resolve.resolver import Resolver

__all__ = ["labelled_results", "main"]


def labelled_results(
    paths: Sequence[str | Path], column: str, truth: str, resolver: Resolver
) -> tuple[dict[str, Resolution], list[tuple[str, str]]]:
    """Each file's texts resolved through the answer pipeline (one file prior per
    file), and the (text, true country) pairs of all files. A text found in several
    files keeps the answer of the first."""
    results: dict[str, Resolution] = {}
    labelled: list[tuple[str, str]] = []
    for path in paths:
        with open(path, encoding="utf-8", newline="") as fh:
            rows = list(csv.DictReader(fh))
        texts = [r[column] for r in rows]
        # The same answer pipeline as every other entry point (file prior included).
        answers = resolve_keys(count_keys(texts, resolver), resolver=resolver)
        for t in texts:
            results.setdefault(t, answers.results[resolver.key(t)])
        labelled.extend((r[column], r[truth]) for r in rows)
    return results, labelled


def main(argv: Sequence[str] | None = None) -> None:
    ap = argparse.ArgumentParser(
        description="Refit the confidence calibration on labelled CSV files."
    )
    ap.add_argument("labelled", nargs="+")
    ap.add_argument("--column", default="text")
    ap.add_argument("--truth", default="country")
    ap.add_argument("--out", default=str(CALIBRATION_PATH))
    args = ap.parse_args(argv)
    resolver = Resolver(calibration=Calibration())
    results, labelled = labelled_results(args.labelled, args.column, args.truth, resolver)
    name = " + ".join(Path(p).name for p in args.labelled)
    cal = fit(results, labelled, name=name)
    cal.save(Path(args.out))
    print(json.dumps(asdict(cal), indent=2))


if __name__ == "__main__":
    main()
