"""Levels under a parent (`--hierarchy`, k-fold encodings): encode's k-fold defaults against
the same with each task's natural nesting — a plane under its carrier, a player under the team
he played for most, a man under the industry he worked in most. Seeds 0 and 1, evaluate.py's
protocol (no time column: the hierarchy is for k-fold encodings).

    POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \\
        benches/modeling/hierarchy_probe.py [flights_late flights_delay baseball males_wage ...]
    ... hierarchy_probe.py --child-alone [flights_late flights_delay]   (tail numbers only)
"""
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import posterity_mean_score, split, task_named  # noqa: E402

NESTING = {"flights_late": "tailnum>carrier", "flights_delay": "tailnum>carrier",
           "baseball": "id>team", "males_wage": "nr>industry", "males_union": "nr>industry"}


def main():
    for prefix in sys.argv[1:] or list(NESTING):
        name, loader, kind = task_named(prefix)
        keys, numeric, tr, te, ytr, yte = split(loader)
        with tempfile.TemporaryDirectory() as d:
            for label, extra in {"k-fold defaults": [],
                                 f"--hierarchy {NESTING[prefix]}": ["--hierarchy", NESTING[prefix]]
                                 }.items():
                score = posterity_mean_score(kind, keys, numeric, tr, te, ytr, yte, Path(d), extra,
                                             None)
                print(f"{prefix:<14} {label:<32} {score:.4f}", flush=True)




def child_alone(prefix):
    """The child's columns alone (the parent encoded, then left out of the learner's
    features): tail number with and without `--hierarchy tailnum>carrier`."""
    import numpy as np
    from evaluate import held_out_score, posterity_encodings
    name, loader, kind = task_named(prefix)
    _, numeric, tr, te, ytr, yte = split(loader)
    keys = ["tailnum", "carrier"]
    with tempfile.TemporaryDirectory() as d:
        for label, extra in {"tailnum alone": [],
                             "tailnum alone, under carrier": ["--hierarchy", "tailnum>carrier"]}.items():
            scores = []
            for seed in (0, 1):
                ftr, fte = posterity_encodings(tr, te, ytr, keys, seed, None, Path(d), extra)
                own = [c for c in ftr.columns if c.startswith("tailnum_")]
                scores.append(held_out_score(kind, numeric, tr, te, ftr[own], fte[own], ytr, yte,
                                             seed))
            print(f"{prefix:<14} {label:<32} {np.mean(scores):.4f}", flush=True)


if __name__ == "__main__":
    if sys.argv[1:2] == ["--child-alone"]:
        for prefix in sys.argv[2:] or ["flights_late", "flights_delay"]:
            child_alone(prefix)
    else:
        main()
