"""How much of a held-out score is the learner's own noise? The encodings of one run are fed to
evaluate.py's learner again with every distinct encoded value moved by a relative 1e-12 (a
change in the last digits, as a different order of summation makes; equal values stay equal),
five times per task, learner seed 0.
The spread of the metric over these copies is a noise floor that the paired bootstrap over
held-out rows does not see: with as-of encodings (which do not depend on the fold seed) and
fewer than 200,000 training rows (below which the learner's seed changes nothing), evaluate.py's
five seeds fit the same model five times.

    OMP_NUM_THREADS=1 POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \
        benches/modeling/jitter_probe.py [baseball bundesliga ...]

Prints per task, for encode's defaults given the time (as-of encodings, which do not depend on
the fold seed): the metric with learner seed 0; its mean and standard deviation over learner
seeds 0-4 (the seed changes the learner only through the sample its bins are cut from, above
200,000 training rows); the same over the moved copies; and, for scale, the k-fold encodings'
metric and the paired bootstrap standard error of the two (200 resamples of held-out rows, as
evaluate.py computes it).
"""
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import (  # noqa: E402
    TASKS, fit_predict, losses, metric, posterity_encodings, split, task_named, time_of)

AS_OF = ["--time-column", "t"]
COPIES = 5
RELATIVE = 1e-12


def moved(features, copy):
    """Each distinct value of each encoded column times (1 + RELATIVE * u), u uniform on
    (-1, 1), the same u for the training and scored rows that hold it: equal values stay
    equal, as they do when only the order of a summation changes."""
    rng = np.random.default_rng(1000 + copy)
    train, scored = (f.copy() for f in features)
    for column in train.columns:
        a, b = train[column].to_numpy(dtype=float), scored[column].to_numpy(dtype=float)
        values, where = np.unique(np.concatenate([a, b]), return_inverse=True)
        shifted = (values * (1 + RELATIVE * rng.uniform(-1, 1, len(values))))[where]
        train[column], scored[column] = shifted[:len(a)], shifted[len(a):]
    return train, scored


def row_losses(kind, numeric, tr, te, ftr, fte, ytr, yte, seed=0):
    xtr = np.hstack([tr[numeric].to_numpy(dtype=float), ftr.to_numpy(dtype=float)])
    xte = np.hstack([te[numeric].to_numpy(dtype=float), fte.to_numpy(dtype=float)])
    return losses(kind, yte, fit_predict(kind, xtr, ytr.values, xte, seed))


def bootstrap_se(kind, a, b):
    rng = np.random.default_rng(0)
    n = len(a)
    diffs = []
    for _ in range(200):
        idx = rng.integers(0, n, n)
        diffs.append(metric(kind, a[idx]) - metric(kind, b[idx]))
    return float(np.std(diffs))


def main():
    prefixes = sys.argv[1:] or [n.split("_")[0] + "_" + n.split("_")[1].split(" ")[0]
                                for n in TASKS]
    print("| task | as-of, learner seed 0 | learner seeds 0-4: mean (sd) | moved copies: mean (sd) "
          "| k-fold, seed 0 | bootstrap SE, as-of − k-fold |")
    print("|---|---|---|---|---|---|")
    for prefix in prefixes:
        name, loader, kind = task_named(prefix)
        keys, numeric, tr, te, ytr, yte = split(loader)
        t, t_scored = time_of(name, tr), time_of(name, te)
        with tempfile.TemporaryDirectory() as d:
            as_of = posterity_encodings(tr, te, ytr, keys, 0, None, Path(d), AS_OF, t, t_scored)
            kfold = posterity_encodings(tr, te, ytr, keys, 0, None, Path(d))
        plain = row_losses(kind, numeric, tr, te, *as_of, ytr, yte)
        seeds = [metric(kind, plain)] + [
            metric(kind, row_losses(kind, numeric, tr, te, *as_of, ytr, yte, s))
            for s in range(1, 5)]
        copies = [metric(kind, row_losses(kind, numeric, tr, te, *moved(as_of, c), ytr, yte))
                  for c in range(COPIES)]
        other = row_losses(kind, numeric, tr, te, *kfold, ytr, yte)
        print(f"| {name.split(' ')[0]} | {seeds[0]:.4f} | {np.mean(seeds):.4f} "
              f"({np.std(seeds, ddof=1):.4f}) | {np.mean(copies):.4f} "
              f"({np.std(copies, ddof=1):.4f}) | {metric(kind, other):.4f} | "
              f"{bootstrap_se(kind, plain, other):.4f} |", flush=True)


if __name__ == "__main__":
    main()
