"""Age of a level's latest evidence as a feature beside the as-of encodings (defaults given the
time): a training row's age is its time less the latest earlier time of its level; a scored
row's, its time less the level's latest training time; NaN for a level with none (the learner
takes NaN as missing). Seeds 0 and 1, evaluate.py's protocol.

    OMP_NUM_THREADS=1 POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \
        benches/modeling/age_probe.py [baseball bundesliga ...]
"""
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import (  # noqa: E402
    TASKS, held_out_score, posterity_encodings, split, task_named, time_of)

AS_OF = ["--time-column", "t"]


def ages(tr, te, keys, t, t_scored):
    a_tr, a_te = pd.DataFrame(index=tr.index), pd.DataFrame(index=te.index)
    for k in keys:
        f = pd.DataFrame({"k": tr[k].values, "t": t.values}, index=tr.index)
        # The latest time of the level strictly before the row's own (as-of encodings
        # read rows up to then).
        u = f.drop_duplicates(["k", "t"]).sort_values(["k", "t"])
        u["prev"] = u.groupby("k")["t"].shift(1)
        f = f.merge(u[["k", "t", "prev"]], on=["k", "t"], how="left")
        a_tr[k + "_age"] = (t.values - f["prev"].values)
        last = pd.Series(t.values).groupby(tr[k].values).max()
        a_te[k + "_age"] = t_scored.values - te[k].map(last).values
    return a_tr, a_te


def main():
    prefixes = sys.argv[1:] or [n.split("_")[0] for n in TASKS]
    for prefix in prefixes:
        name, loader, kind = task_named(prefix)
        keys, numeric, tr, te, ytr, yte = split(loader)
        t, t_scored = time_of(name, tr), time_of(name, te)
        a_tr, a_te = ages(tr, te, keys, t, t_scored)
        base, aged = [], []
        with tempfile.TemporaryDirectory() as d:
            for s in (0, 1):
                ftr, fte = posterity_encodings(tr, te, ytr, keys, s, None, Path(d), AS_OF, t, t_scored)
                base.append(held_out_score(kind, numeric, tr, te, ftr, fte, ytr, yte, s))
                aged.append(held_out_score(kind, numeric, tr, te, pd.concat([ftr, a_tr], axis=1),
                                           pd.concat([fte, a_te], axis=1), ytr, yte, s))
        print(f"{name[:24]:<24} as-of {np.mean(base):.4f}  with ages {np.mean(aged):.4f}", flush=True)


if __name__ == "__main__":
    main()
