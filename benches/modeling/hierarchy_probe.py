"""Levels under a parent (`--hierarchy`, k-fold encodings): encode's k-fold defaults against
the same with each task's natural nesting — a plane under its carrier, a player under the team
he played for most, a man under the industry he worked in most. Seeds 0 and 1, evaluate.py's
protocol; with --as-of, as-of encodings (the rows' times given, encode's defaults then).

    POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \\
        benches/modeling/hierarchy_probe.py [--as-of] [flights_late flights_delay baseball ...]
    ... hierarchy_probe.py [--as-of] --child-alone [flights_late flights_delay]   (tail numbers only)
"""
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import posterity_mean_score, split, task_named, time_of  # noqa: E402

AS_OF = "--as-of" in sys.argv
ARGS = [a for a in sys.argv[1:] if a != "--as-of"]


TIME_FLAGS = ["--time-column", "t"] if AS_OF else []


def times(name, tr):
    """The training rows' times with --as-of, else None (k-fold encodings)."""
    return time_of(name, tr) if AS_OF else None

NESTING = {"flights_late": "tailnum>carrier", "flights_delay": "tailnum>carrier",
           "baseball": "id>team", "males_wage": "nr>industry", "males_union": "nr>industry"}


def main():
    for prefix in ARGS or list(NESTING):
        name, loader, kind = task_named(prefix)
        keys, numeric, tr, te, ytr, yte = split(loader)
        with tempfile.TemporaryDirectory() as d:
            for label, extra in {"as-of defaults" if AS_OF else "k-fold defaults": TIME_FLAGS,
                                 f"--hierarchy {NESTING[prefix]}": [*TIME_FLAGS, "--hierarchy",
                                                                    NESTING[prefix]]
                                 }.items():
                score = posterity_mean_score(kind, keys, numeric, tr, te, ytr, yte, Path(d), extra,
                                             times(name, tr))
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
        for label, extra in {"tailnum alone": TIME_FLAGS,
                             "tailnum alone, under carrier": [*TIME_FLAGS, "--hierarchy",
                                                              "tailnum>carrier"]}.items():
            scores = []
            for seed in (0, 1):
                ftr, fte = posterity_encodings(tr, te, ytr, keys, seed, None, Path(d), extra,
                                               times(name, tr))
                own = [c for c in ftr.columns if c.startswith("tailnum_")]
                scores.append(held_out_score(kind, numeric, tr, te, ftr[own], fte[own], ytr, yte,
                                             seed))
            print(f"{prefix:<14} {label:<32} {np.mean(scores):.4f}", flush=True)


if __name__ == "__main__":
    if ARGS[:1] == ["--child-alone"]:
        for prefix in ARGS[1:] or ["flights_late", "flights_delay"]:
            child_alone(prefix)
    else:
        main()
