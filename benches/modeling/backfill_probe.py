"""As-of encodings whose training rows with no earlier row of their level read the k-fold
encoding instead of the bare prior. Under as-of encodings a level's first period carries no
evidence, so on a yearly panel a large share of the training rows teach the learner nothing
about the key, while every scored row reads a long history; k-fold encodings give those rows
the level's other years. Seeds 0 and 1, evaluate.py's protocol; as-of, k-fold and the
backfilled pair. Five seeds with bootstrap standard errors: evaluate.py --encodings
posterity,...,posterity_time_backfilled.

    OMP_NUM_THREADS=1 POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \
        benches/modeling/backfill_probe.py [baseball bundesliga ...]
"""
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import (  # noqa: E402
    TASKS, backfilled, held_out_score, posterity_encodings, split, task_named, time_of)

AS_OF = ["--time-column", "t"]


def main():
    prefixes = sys.argv[1:] or [n.split("_")[0] for n in TASKS]
    for prefix in prefixes:
        name, loader, kind = task_named(prefix)
        keys, numeric, tr, te, ytr, yte = split(loader)
        t, t_scored = time_of(name, tr), time_of(name, te)
        scores = {v: [] for v in ["as-of", "k-fold", "backfilled"]}
        with tempfile.TemporaryDirectory() as d:
            for s in (0, 1):
                as_of = posterity_encodings(tr, te, ytr, keys, s, None, Path(d), AS_OF, t, t_scored)
                kfold = posterity_encodings(tr, te, ytr, keys, s, None, Path(d))
                filled, share = backfilled(as_of, kfold, tr, keys, t)
                for v, (ftr, fte) in {"as-of": as_of, "k-fold": kfold, "backfilled": filled}.items():
                    scores[v].append(held_out_score(kind, numeric, tr, te, ftr, fte, ytr, yte, s))
        first = " ".join(f"{k}:{v:.2f}" for k, v in share.items())
        print(f"{name[:24]:<24} " + "  ".join(f"{v} {np.mean(x):.4f}"
                                              for v, x in scores.items())
              + f"  (first-period share {first})", flush=True)


if __name__ == "__main__":
    main()
