"""Hand-written encodings of one task on seeds 0 and 1 (ablation.py's seeds), to set
beside ablation.py's lines: evaluate.py's protocol.

    target/modeling-venv/bin/python benches/modeling/hand_two_seeds.py TASK_PREFIX NAME,NAME
"""
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import hand_encodings, held_out_score, split, task_named  # noqa: E402

task, loader, kind = task_named(sys.argv[1])
keys, numeric, tr, te, ytr, yte = split(loader)
for name in sys.argv[2].split(","):
    scores = []
    for seed in [0, 1]:
        ftr, fte = hand_encodings(name, tr, te, ytr, keys, seed)
        scores.append(held_out_score(kind, numeric, tr, te, ftr, fte, ytr, yte, seed))
    print(f"{task.split(' ')[0]:<22} {name:<28} {np.mean(scores):.4f}", flush=True)
