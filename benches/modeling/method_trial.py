"""Would a learner trial on the training rows alone choose between k-fold and as-of encodings
as the held-out rows do? Each task's training rows are split once more in time (the latest
fifth scored, the rest encoded and learned, evaluate.py's learner, seeds 0 and 1); encode's
defaults without the time column (k-fold) and with it (as-of). Compare with MODELING.md's
held-out tables.

    OMP_NUM_THREADS=1 POSTERITY_BIN=target/release/posterity \\
        target/modeling-venv/bin/python benches/modeling/method_trial.py [task prefixes]
"""
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import TASKS, posterity_mean_score, split, task_named, time_of  # noqa: E402

VARIANTS = {"k-fold": [], "as-of": ["--time-column", "t"]}


def inner_trial(judge, number_format):
    """For each task named on the command line (default: all), the training rows split once
    more in time (the latest fifth scored); `judge(kind, keys, numeric, early rows, late rows,
    early target, late target, work dir, encode options, early times)` gives each variant's
    loss; prints a table row with both losses and the lower one's variant."""
    for prefix in sys.argv[1:] or [name.split(" ")[0] for name in TASKS]:
        name, loader, kind = task_named(prefix)
        keys, numeric, tr, _, ytr, _ = split(loader)
        t = time_of(name, tr)
        early = (t < np.quantile(t.values, 0.8)).values
        losses = {}
        with tempfile.TemporaryDirectory() as d:
            for variant, extra in VARIANTS.items():
                losses[variant] = judge(kind, keys, numeric, tr[early], tr[~early], ytr[early],
                                        ytr[~early], Path(d), extra,
                                        t[early] if extra else None)
        choice = min(losses, key=losses.get)
        print(f"| {prefix} | {losses['k-fold']:{number_format}} | "
              f"{losses['as-of']:{number_format}} | {choice} |", flush=True)


def learner_loss(kind, keys, numeric, tr, te, ytr, yte, work, extra, time):
    return posterity_mean_score(kind, keys, numeric, tr, te, ytr, yte.values, work, extra, time,
                                seeds=(0, 1))


if __name__ == "__main__":
    inner_trial(learner_loss, ".4f")
