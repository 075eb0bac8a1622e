"""Where k-fold encodings trail the leaky in-sample mean on the firm panels: encode's k-fold
defaults against more folds, scoring with all the data, and extra readers, beside the
in-sample and smoothed out-of-fold means; seeds 0 and 1, evaluate.py's protocol.

    POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \\
        benches/modeling/reader_probe.py [snmesp empluk]
"""
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import (  # noqa: E402
    hand_encodings, held_out_score, posterity_mean_score, split, task_named)

VARIANTS = {"k-fold defaults": [], "--folds 10": ["--folds", "10"],
            "--score-evidence full": ["--score-evidence", "full"],
            "--readers mean,sd": ["--readers", "mean,sd"],
            "--readers mean,data_weight": ["--readers", "mean,data_weight"]}


def main():
    for prefix in sys.argv[1:] or ["snmesp", "empluk"]:
        name, loader, kind = task_named(prefix)
        keys, numeric, tr, te, ytr, yte = split(loader)
        with tempfile.TemporaryDirectory() as d:
            for label, extra in VARIANTS.items():
                score = posterity_mean_score(kind, keys, numeric, tr, te, ytr, yte, Path(d), extra,
                                             None)
                print(f"{prefix:<10} {label:<28} {score:.4f}", flush=True)
        for e in ["in_sample", "oof_smoothed"]:
            scores = [held_out_score(kind, numeric, tr, te, *hand_encodings(e, tr, te, ytr, keys, s),
                                     ytr, yte, s) for s in (0, 1)]
            print(f"{prefix:<10} {e:<28} {np.mean(scores):.4f}", flush=True)


if __name__ == "__main__":
    main()
