"""Do training and scored rows get features from the same distribution?

    benches/modeling/run.sh --shift      # or: python benches/modeling/shift.py

On each task's training rows, a random fifth is held out and scored, the rest is
encoded out-of-fold. Both come from one distribution, so every feature of the scored
rows should look like the same feature of the training rows. The two-sample
Kolmogorov-Smirnov statistic D (the largest gap between the two empirical CDFs) says
how far apart they are; the 5 % critical value 1.36 * sqrt((n + m) / (n m)) is the
large-sample value (Smirnov's table, from memory) for two independent samples, so D
much above it is a shift the encoding made. Rows are pooled over all levels, so D
also moves with how a level's rows split between the two samples; the critical value
is a guide, not a test.

Compared: `--score-evidence full` (scored rows read each level's posterior of all
training rows) and `matched` (the default: (k-1)/k of the data, as an out-of-fold
training row sees).
"""

import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import MISSING, TASKS, posterity_bin  # noqa: E402


def ks_statistic(a, b):
    a, b = np.sort(a), np.sort(b)
    grid = np.concatenate([a, b])
    cdf_a = np.searchsorted(a, grid, side="right") / len(a)
    cdf_b = np.searchsorted(b, grid, side="right") / len(b)
    return float(np.max(np.abs(cdf_a - cdf_b)))


def encode(tr, te, keys, evidence, work):
    tr.to_parquet(work / "train.parquet", index=False)
    te[keys].to_parquet(work / "test.parquet", index=False)
    out = work / f"out-{evidence}"
    subprocess.run(
        [posterity_bin(), "-q", "encode", "--train", str(work / "train.parquet"), "--target", "y",
         "--columns", ",".join(keys), "--readers", "mean,sd,data_weight", "--indicators", "0",
         "--score-evidence", evidence, "--score", str(work / "test.parquet"), "--out", str(out),
         "--replace"],
        check=True, stdout=subprocess.DEVNULL)
    return (pd.read_parquet(out / "train_encoded.parquet"),
            pd.read_parquet(out / "scored.parquet"))


def main():
    rows = []
    with tempfile.TemporaryDirectory() as d:
        work = Path(d)
        for task, (loader, _kind) in TASKS.items():
            frame, keys, _numeric, y, is_train = loader()
            frame = frame[is_train.values].copy()
            for k in keys:
                frame[k] = frame[k].astype("string").fillna(MISSING).astype(str)
            frame = frame[keys].assign(y=y[is_train.values].values)
            held = np.random.default_rng(0).random(len(frame)) < 0.2
            tr, te = frame[~held], frame[held]
            critical = 1.36 * np.sqrt((len(tr) + len(te)) / (len(tr) * len(te)))
            results = {e: encode(tr, te, keys, e, work) for e in ["full", "matched"]}
            for k in keys:
                for reader in ["mean", "sd", "data_weight"]:
                    col = f"{k}_{reader}"
                    d_full, d_matched = (
                        ks_statistic(results[e][0][col].to_numpy(), results[e][1][col].to_numpy())
                        for e in ["full", "matched"])
                    rows.append((task.split(" ")[0], col, d_full, d_matched, critical))
    print("| task | feature | D, full | D, matched (default) | 5 % critical |")
    print("|---|---|---|---|---|")
    for task, col, f, m, c in rows:
        print(f"| {task} | {col} | {f:.4f} | {m:.4f} | {c:.4f} |")
    full = np.array([r[2] for r in rows])
    matched = np.array([r[3] for r in rows])
    print(f"\nmedian D: full {np.median(full):.4f}, matched {np.median(matched):.4f}; "
          f"matched smaller on {int((matched < full).sum())} of {len(rows)} features")


if __name__ == "__main__":
    main()
