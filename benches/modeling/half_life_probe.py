"""Recency weights on the two tasks split in time: encode's defaults with and without
`--half-life H --time-column t` (t: day of the year for flights, the season's year for
Bundesliga); seeds 0 and 1, evaluate.py's protocol.

    POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \\
        benches/modeling/half_life_probe.py
"""
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import held_out_score, posterity_bin, split, task_named  # noqa: E402

# (task prefix, time of a row, half-lives in that time's units)
PROBES = [
    ("bundesliga", lambda f: f["Year"].astype(float), [3.0, 10.0]),
    ("flights_delay", lambda f: (pd.to_datetime(f[["year", "month", "day"]]).dt.day_of_year).astype(float), [30.0, 90.0]),
]


def encodings(tr, te, ytr, keys, t, seed, work, extra):
    train = tr[keys].copy()
    train["y"], train["t"] = ytr.values, t.values
    train.to_parquet(work / "train.parquet", index=False)
    te[keys].to_parquet(work / "test.parquet", index=False)
    out = work / "out"
    subprocess.run(
        [posterity_bin(), "-q", "encode", "--train", str(work / "train.parquet"), "--target", "y",
         "--columns", ",".join(keys), "--seed", str(seed), "--score", str(work / "test.parquet"),
         "--out", str(out), "--replace", *extra],
        check=True, stdout=subprocess.DEVNULL)
    enc_tr = pd.read_parquet(out / "train_encoded.parquet").drop(columns=keys + ["y", "t"])
    enc_te = pd.read_parquet(out / "scored.parquet").drop(columns=keys)
    enc_tr.index, enc_te.index = tr.index, te.index
    return enc_tr, enc_te


def main():
    with tempfile.TemporaryDirectory() as d:
        for prefix, time_of, half_lives in PROBES:
            _, loader, kind = task_named(prefix)
            keys, numeric, tr, te, ytr, yte = split(loader)
            t = time_of(tr)
            variants = {"defaults": []}
            for h in half_lives:
                variants[f"half-life {h:g}"] = ["--half-life", str(h), "--time-column", "t"]
            for name, extra in variants.items():
                scores = []
                for seed in [0, 1]:
                    ftr, fte = encodings(tr, te, ytr, keys, t, seed, Path(d), extra)
                    scores.append(held_out_score(kind, numeric, tr, te, ftr, fte, ytr, yte, seed))
                print(f"{prefix:<16} {name:<18} {np.mean(scores):.4f}", flush=True)


if __name__ == "__main__":
    main()
