"""Can the training rows say whether k-fold or as-of encodings will score better? Measured,
not built (fifteenth session).

K-fold training encodings read a level's rows from both sides of a row's time; scored rows read
only the past. If a level's outcome does not move over the training period, the later rows
add nothing the earlier ones do not say, and k-fold encodings lose nothing to time while
giving early training rows the history as-of encodings hide from them. So the statistic is the
share of what a reading from both sides gains over the overall mean that a reading from the
past alone already gains, for held-aside rows of the training period, per key: near 1 for a
level that does not move, below it for one that drifts. Two cuts are printed:

- `late`: the held-aside rows are the latest fifth of the training rows (by time); the
  past reading uses the earlier rows, the other one every other training row;
- `middle`: the held-aside rows are the middle fifth (40-60 % time quantiles); the past reading
  uses the rows before them, the other one the rows before and after.

Each reading is a level's mean shrunk toward the overall mean of the rows it reads with
m = (mean within-level variance) / (variance between level means) pseudo-rows (a method-of-
moments strength; common practice, no source). No learner, no encode run: seconds per task.

    target/modeling-venv/bin/python benches/modeling/method_probe.py [task prefixes]
"""
import sys
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import TASKS, split, task_named, time_of  # noqa: E402


def strength(levels, y):
    """Method-of-moments pseudo-rows: within-level variance over between-level variance."""
    s = pd.DataFrame({"k": levels, "y": y}).groupby("k").y.agg(["mean", "var", "count"])
    within = np.nanmean(s["var"])
    between = max(s["mean"].var() - within / s["count"].mean(), 1e-12)
    return within / between


def share(levels, y, aside, past, other):
    """Of the gain of reading `other` rows over the overall mean, the share that reading only
    `past` rows already has, on the `aside` rows (squared error)."""
    m = strength(levels, y)
    g = y[past].mean()
    rows = pd.DataFrame({"k": levels, "y": y})

    def reading(read):
        s = rows[read].groupby("k").y.agg(["sum", "count"]).reindex(levels[aside]).fillna(0)
        return (s["sum"].values + m * g) / (s["count"].values + m)

    target = y[aside]
    loss = [np.mean((target - r) ** 2) for r in (np.full(len(target), g), reading(past),
                                                 reading(other))]
    gain_past, gain_other = loss[0] - loss[1], loss[0] - loss[2]
    return gain_past / gain_other if gain_other > 0 else float("nan")


def main():
    names = [task_named(p)[0] for p in sys.argv[1:]] or list(TASKS)
    for name in names:
        keys, _, tr, _, ytr, _ = split(TASKS[name][0])
        t = time_of(name, tr).values
        y = ytr.values.astype(float)
        late = t >= np.quantile(t, 0.8)
        lo, hi = np.quantile(t, 0.4), np.quantile(t, 0.6)
        middle = (t >= lo) & (t <= hi)
        out = []
        for k in keys:
            levels = tr[k].values
            out.append(f"{k} ({len(set(levels))}): late {late_share(levels, y, late):.2f}, "
                       f"middle {share(levels, y, middle, t < lo, ~middle):.2f}")
        print(f"{name.split()[0]:<20} " + "; ".join(out), flush=True)


def late_share(levels, y, late):
    """The `late` cut: the past reading uses the earlier rows, the other one every training
    row but the row itself (leave-one-out)."""
    m = strength(levels, y)
    g = y[~late].mean()
    rows = pd.DataFrame({"k": levels, "y": y})
    target = y[late]
    early = rows[~late].groupby("k").y.agg(["sum", "count"]).reindex(levels[late]).fillna(0)
    every = rows.groupby("k").y.agg(["sum", "count"]).reindex(levels[late])
    past = (early["sum"].values + m * g) / (early["count"].values + m)
    other = (every["sum"].values - target + m * g) / (every["count"].values - 1 + m)
    loss = [np.mean((target - r) ** 2) for r in (np.full(len(target), g), past, other)]
    gain_other = loss[0] - loss[2]
    return (loss[0] - loss[1]) / gain_other if gain_other > 0 else float("nan")


if __name__ == "__main__":
    main()
