"""Per key: how fast a level's outcomes decorrelate in time. The correlation of
level-by-time residuals (a level's mean outcome at a time less its overall mean) at lag 1
against lag H (the scored rows' median time past the training rows), on the training rows.
A candidate rule for `--horizon matched`, measured in MODELING.md (it does not separate the
tasks).

    target/modeling-venv/bin/python benches/modeling/lag_correlation.py
"""
import sys
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import split, task_named, time_of  # noqa: E402

HORIZON = {"flights_late": 31, "flights_delay": 31, "baseball": 5, "bundesliga": 5}


def lag_correlation(residuals, lag):
    """Correlation of each (level, time) residual with the same level's `lag` units before."""
    earlier = residuals.assign(t=residuals.t + lag)
    both = residuals.merge(earlier, on=["k", "t"], suffixes=("", "_before"))
    return np.corrcoef(both.r, both.r_before)[0, 1]


def main():
    for prefix, h in HORIZON.items():
        name, loader, _ = task_named(prefix)
        keys, _, tr, _, ytr, _ = split(loader)
        t = time_of(name, tr).values
        out = []
        for k in keys:
            rows = pd.DataFrame({"k": tr[k].values, "t": t, "y": ytr.values.astype(float)})
            cells = rows.groupby(["k", "t"]).y.mean().rename("m").reset_index()
            cells["r"] = cells.m - cells.groupby("k").m.transform("mean")
            cells = cells[["k", "t", "r"]]
            out.append(f"{k}: lag 1 {lag_correlation(cells, 1):.3f}, "
                       f"lag {h} {lag_correlation(cells, h):.3f}")
        print(f"{prefix:<14} " + "; ".join(out), flush=True)


if __name__ == "__main__":
    main()
