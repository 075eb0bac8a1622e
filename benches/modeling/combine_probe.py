"""Two of encode's readings of the same keys side by side, so the learner can choose between
them: as-of encodings (defaults given the time) beside k-fold encodings, and beside as-of
encodings with `--horizon matched`; each alone for reference. Seeds 0 and 1, evaluate.py's
protocol. At scoring time every column reads all training rows, so the pair differs only in
what the training rows saw.

    OMP_NUM_THREADS=1 POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \
        benches/modeling/combine_probe.py [baseball bundesliga ...]
"""
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import (  # noqa: E402
    TASKS, held_out_score, posterity_encodings, split, task_named, time_of)

AS_OF = ["--time-column", "t"]
MATCHED = ["--time-column", "t", "--horizon", "matched"]


def side_by_side(first, second, suffix):
    """Training and scored features of `first` beside `second`'s, renamed with `suffix`."""
    return (pd.concat([first[0], second[0].add_suffix(suffix)], axis=1),
            pd.concat([first[1], second[1].add_suffix(suffix)], axis=1))


def main():
    prefixes = sys.argv[1:] or [n.split("_")[0] for n in TASKS]
    for prefix in prefixes:
        name, loader, kind = task_named(prefix)
        keys, numeric, tr, te, ytr, yte = split(loader)
        t, t_scored = time_of(name, tr), time_of(name, te)
        scores = {v: [] for v in ["as-of", "k-fold", "matched", "as-of + k-fold", "as-of + matched"]}
        with tempfile.TemporaryDirectory() as d:
            for s in (0, 1):
                as_of = posterity_encodings(tr, te, ytr, keys, s, None, Path(d), AS_OF, t, t_scored)
                kfold = posterity_encodings(tr, te, ytr, keys, s, None, Path(d))
                matched = posterity_encodings(tr, te, ytr, keys, s, None, Path(d), MATCHED, t,
                                              t_scored)
                variants = {
                    "as-of": as_of, "k-fold": kfold, "matched": matched,
                    "as-of + k-fold": side_by_side(as_of, kfold, "_kfold"),
                    "as-of + matched": side_by_side(as_of, matched, "_matched"),
                }
                for v, (ftr, fte) in variants.items():
                    scores[v].append(held_out_score(kind, numeric, tr, te, ftr, fte, ytr, yte, s))
        print(f"{name[:24]:<24} " + "  ".join(f"{v} {np.mean(x):.4f}" for v, x in scores.items()),
              flush=True)


if __name__ == "__main__":
    main()
