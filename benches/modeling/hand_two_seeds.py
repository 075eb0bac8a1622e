"""Hand-written encodings of one task on seeds 0 and 1 (ablation.py's seeds), to set
beside ablation.py's lines: evaluate.py's protocol.

    target/modeling-venv/bin/python benches/modeling/hand_two_seeds.py TASK_PREFIX NAME,NAME
"""
import sys
from pathlib import Path
import numpy as np, pandas as pd
sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import MISSING, TASKS, fit_predict, losses, metric, hand_encodings
task = [t for t in TASKS if t.startswith(sys.argv[1])][0]
loader, kind = TASKS[task]
frame, keys, numeric, y, is_train = loader()
for k in keys:
    frame[k] = frame[k].astype("string").fillna(MISSING).astype(str)
tr, te = frame[is_train.values], frame[~is_train.values]
ytr, yte = y[is_train.values], y[~is_train.values].values
for name in sys.argv[2].split(","):
    scores = []
    for seed in [0, 1]:
        ftr, fte = hand_encodings(name, tr, te, ytr, keys, seed)
        xtr = pd.concat([tr[numeric], ftr], axis=1).to_numpy(dtype=float)
        xte = pd.concat([te[numeric], fte], axis=1).to_numpy(dtype=float)
        scores.append(metric(kind, losses(kind, yte, fit_predict(kind, xtr, ytr.values, xte, seed))))
    print(f"{task.split(' ')[0]:<22} {name:<28} {np.mean(scores):.4f}", flush=True)
