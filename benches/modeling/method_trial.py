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


def main():
    for prefix in sys.argv[1:] or [name.split(" ")[0] for name in TASKS]:
        name, loader, kind = task_named(prefix)
        keys, numeric, tr, _, ytr, _ = split(loader)
        t = time_of(name, tr)
        early = (t < np.quantile(t.values, 0.8)).values
        scores = {}
        with tempfile.TemporaryDirectory() as d:
            for variant, extra in VARIANTS.items():
                scores[variant] = posterity_mean_score(
                    kind, keys, numeric, tr[early], tr[~early], ytr[early], ytr[~early].values,
                    Path(d), extra, t[early] if extra else None, seeds=(0, 1))
        choice = min(scores, key=scores.get)
        print(f"| {prefix} | {scores['k-fold']:.4f} | {scores['as-of']:.4f} | {choice} |",
              flush=True)


if __name__ == "__main__":
    main()
