"""Would a learner trial on the training rows alone choose `--horizon matched` where it helps
held out? Each task's training rows are split once more in time (the latest fifth scored, the
rest encoded and learned, evaluate.py's learner, seed 0); as-of encodings with and without the
horizon matched to the inner scored rows. Compare with MODELING.md's held-out table.

    POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \\
        benches/modeling/inner_trial.py [flights_late flights_delay baseball bundesliga]
"""
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import posterity_mean_score, split, task_named, time_of  # noqa: E402

AS_OF = ["--time-column", "t"]
VARIANTS = {"every earlier time": AS_OF, "horizon matched": AS_OF + ["--horizon", "matched"]}


def main():
    for prefix in sys.argv[1:] or ["flights_late", "flights_delay", "baseball", "bundesliga"]:
        name, loader, kind = task_named(prefix)
        keys, numeric, tr, _, ytr, _ = split(loader)
        t = time_of(name, tr)
        early = (t < np.quantile(t.values, 0.8)).values
        with tempfile.TemporaryDirectory() as d:
            for variant, extra in VARIANTS.items():
                score = posterity_mean_score(
                    kind, keys, numeric, tr[early], tr[~early], ytr[early], ytr[~early].values,
                    Path(d), extra, t[early], seeds=(0,), score_time=t[~early])
                print(f"{prefix:<14} {variant:<20} {score:.5f}", flush=True)


if __name__ == "__main__":
    main()
