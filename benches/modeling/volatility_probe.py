"""Does the `sd` reader help where levels differ in volatility? For each continuous task (a
Normal-Inverse-Gamma encoding), each key's fitted prior shape alpha0 (the levels' variances are
inverse-gamma(alpha0, beta0) around their mean; alpha0 <= 2 means that spread has no finite
variance) and the learner's score with the mean alone, with mean and sd for every key, and with
sd only for keys whose alpha0 <= 2. k-fold and as-of; seeds 0 and 1, evaluate.py's protocol.

    POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \\
        benches/modeling/volatility_probe.py [flights_delay baseball males_wage laborsupply empluk snmesp]
"""
import json
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import (  # noqa: E402
    held_out_score, posterity_encodings, split, task_named, time_of)

TASKS = ["flights_delay", "baseball", "males_wage", "laborsupply", "empluk", "snmesp"]


def shapes(work, seed):
    out = work / f"out-{seed}-mean,sd"
    return {k["key"]: k["prior"]["alpha0"] for k in json.load(open(out / "summary.json"))}


def main():
    for prefix in sys.argv[1:] or TASKS:
        name, loader, kind = task_named(prefix)
        keys, numeric, tr, te, ytr, yte = split(loader)
        t, t_scored = time_of(name, tr), time_of(name, te)
        for method, extra, times in [("k-fold", [], (None, None)),
                                     ("as-of", ["--time-column", "t"], (t, t_scored))]:
            scores = {"mean": [], "mean,sd": [], "sd where alpha0 <= 2": []}
            with tempfile.TemporaryDirectory() as d:
                work = Path(d)
                for seed in (0, 1):
                    ftr, fte = posterity_encodings(tr, te, ytr, keys, seed, "mean,sd", work, extra,
                                                   *times)
                    alpha = shapes(work, seed)
                    calm = [f"{k}_sd" for k in keys if alpha.get(k, 0) > 2]
                    sds = [f"{k}_sd" for k in keys if f"{k}_sd" in ftr]
                    for label, drop in [("mean", sds), ("mean,sd", []),
                                        ("sd where alpha0 <= 2", calm)]:
                        scores[label].append(held_out_score(
                            kind, numeric, tr, te, ftr.drop(columns=drop), fte.drop(columns=drop),
                            ytr, yte, seed))
            shape = " ".join(f"{k}={a:.3g}" for k, a in alpha.items())
            cells = "  ".join(f"{label} {np.mean(v):.4f}" for label, v in scores.items())
            print(f"{prefix:<14} {method:<7} alpha0: {shape}\n    {cells}", flush=True)


if __name__ == "__main__":
    main()
