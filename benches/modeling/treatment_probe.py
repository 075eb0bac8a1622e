"""Bundesliga (49 teams, most with hundreds of rows): as-of encodings with the treatments
encode offers for a key of few large levels; seeds 0 and 1, evaluate.py's protocol.

    POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \\
        benches/modeling/treatment_probe.py
"""
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import (  # noqa: E402
    held_out_score, posterity_encodings, split, task_named, time_of)

VARIANTS = {
    "as-of (defaults given the time)": ["--time-column", "t"],
    "as-of, no indicators": ["--time-column", "t", "--indicators", "0"],
    "as-of, an indicator for every team": ["--time-column", "t", "--indicators", "49",
                                           "--indicator-min-rows", "0"],
    "teams as levels only": ["--time-column", "t", "--treatment", "HomeTeam=levels",
                             "--treatment", "AwayTeam=levels"],
}


def main():
    name, loader, kind = task_named("bundesliga")
    keys, numeric, tr, te, ytr, yte = split(loader)
    t = time_of(name, tr)
    with tempfile.TemporaryDirectory() as d:
        for variant, extra in VARIANTS.items():
            scores = []
            for seed in [0, 1]:
                ftr, fte = posterity_encodings(tr, te, ytr, keys, seed, None, Path(d), extra, t)
                scores.append(held_out_score(kind, numeric, tr, te, ftr, fte, ytr, yte, seed))
            print(f"{variant:<36} {np.mean(scores):.4f}", flush=True)


if __name__ == "__main__":
    main()
