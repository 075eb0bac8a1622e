"""Does encoding a clipped target help a continuous task? encode's defaults given the time
(as-of encodings) fed the training target as it is, and clipped to its 1st and 99th
percentiles (the learner still learns the raw target; clipping only what the encodings
read). Two seeds, every continuous task (or those whose names start with the first
argument's comma-separated prefixes); the table's columns: task, the training target's
kurtosis, RMSE as it is, RMSE clipped.

    OMP_NUM_THREADS=1 POSTERITY_BIN=target/release/posterity \
        target/modeling-venv/bin/python benches/modeling/winsor_probe.py
"""
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
import evaluate as ev  # noqa: E402

SEEDS = (0, 1)


def kurtosis(task):
    """The fourth moment of the standardised training target (3 for a normal one)."""
    keys, numeric, tr, te, ytr, yte = ev.split(ev.task_named(task)[1])
    z = (ytr.values - ytr.values.mean()) / ytr.values.std()
    return float((z ** 4).mean())


def score(task, clip):
    name, loader, kind = ev.task_named(task)
    keys, numeric, tr, te, ytr, yte = ev.split(loader)
    y_enc = ytr
    if clip:
        lo, hi = np.quantile(ytr, [0.01, 0.99])
        y_enc = ytr.clip(lo, hi)
    out = []
    with tempfile.TemporaryDirectory() as d:
        for seed in SEEDS:
            ftr, fte = ev.posterity_encodings(tr, te, y_enc, keys, seed, None, Path(d),
                                              ev.TIMED["posterity_time"], ev.time_of(name, tr),
                                              ev.time_of(name, te))
            out.append(ev.held_out_score(kind, numeric, tr, te, ftr, fte, ytr, yte, seed))
    return name, float(np.mean(out))


if __name__ == "__main__":
    tasks = [t for t, (_, kind) in ev.TASKS.items() if kind == "continuous"]
    if len(sys.argv) > 1:
        tasks = [t for t in tasks if any(t.startswith(p) for p in sys.argv[1].split(","))]
    for t in tasks:
        prefix = t.split(" ")[0]
        (name, raw), (_, clipped) = score(prefix, False), score(prefix, True)
        print(f"| {prefix} | {kurtosis(prefix):.1f} | {raw:.4f} | {clipped:.4f} |", flush=True)
