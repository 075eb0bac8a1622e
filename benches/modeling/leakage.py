"""Target leakage, measured with a tree learner.

A key independent of the target carries no information, so a model trained on its
encoding must gain nothing: on held-out rows its log-loss is no better than the base
rate's, and on its own training rows it gains no more than it does from a column of
pure noise (a gradient-boosted learner fits some noise in-sample). An encoding that
lets a row see its own target fails the second test: trees read the target back.

    python leakage.py POSTERITY_BIN WORK_DIR  ->  one JSON line per method

Run by tests/it/leakage.rs (which asserts the verdicts) and by hand.
"""

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.ensemble import HistGradientBoostingClassifier
from sklearn.metrics import log_loss

ROWS, LEVELS, RATE = 20_000, 2_000, 0.3


def data(seed):
    rng = np.random.default_rng(seed)
    index = rng.integers(0, LEVELS, ROWS)
    key = np.array([f"k{i}" for i in index])
    # A parent of 20 keys each, for --hierarchy key>group.
    group = np.array([f"g{i % 100}" for i in index])
    y = (rng.random(ROWS) < RATE).astype(int)
    t = np.sort(rng.integers(0, 200, ROWS))
    return pd.DataFrame({"key": key, "group": group, "t": t, "y": y})


def learner():
    return HistGradientBoostingClassifier(max_iter=100, learning_rate=0.1, max_leaf_nodes=31,
                                          early_stopping=False, random_state=0)


def gains(x_train, y_train, x_test, y_test):
    base_train = log_loss(y_train, np.full(len(y_train), y_train.mean()))
    base_test = log_loss(y_test, np.full(len(y_test), y_train.mean()))
    model = learner().fit(x_train, y_train)
    return (base_train - log_loss(y_train, model.predict_proba(x_train)[:, 1]),
            base_test - log_loss(y_test, model.predict_proba(x_test)[:, 1]))


def main():
    binary, work = sys.argv[1], Path(sys.argv[2])
    work.mkdir(parents=True, exist_ok=True)
    train, test = data(1), data(2)
    train.to_parquet(work / "train.parquet", index=False)
    test.to_parquet(work / "test.parquet", index=False)
    rng = np.random.default_rng(3)
    noise_in, noise_out = gains(rng.random((ROWS, 1)), train.y.values, rng.random((ROWS, 1)),
                                test.y.values)
    print(json.dumps({"method": "noise control", "in_sample_gain": noise_in,
                      "held_out_gain": noise_out}))
    # The encodings below are two columns (mean, sd): a tree memorises more with two
    # noise columns than with one, so they are held to two columns of noise.
    noise_in, noise_out = gains(rng.random((ROWS, 2)), train.y.values, rng.random((ROWS, 2)),
                                test.y.values)
    print(json.dumps({"method": "noise control, 2 columns", "in_sample_gain": noise_in,
                      "held_out_gain": noise_out}))
    # Recency weights and horizons only reweight or drop rows a training row may see;
    # measured too.
    methods = {
        "kfold": ["--method", "kfold"],
        # The most folds encode takes: beyond them k-fold approaches leave-one-out.
        "kfold, 10 folds": ["--method", "kfold", "--folds", "10"],
        "kfold, 11 folds": ["--method", "kfold", "--folds", "11"],
        "time": ["--time-column", "t"],
        "kfold, half-life fitted": ["--time-column", "t", "--method", "kfold", "--half-life",
                                    "fitted"],
        "time, half-life 20": ["--time-column", "t", "--method", "time", "--half-life", "20"],
        "time, half-life fitted": ["--time-column", "t", "--method", "time", "--half-life",
                                   "fitted"],
        "time, horizon 20": ["--time-column", "t", "--horizon", "20"],
        # The key's prior centred on its group's out-of-fold posterior (the group is
        # encoded too, but only the key's columns are measured).
        "kfold, hierarchy": ["--columns", "key,group", "--hierarchy", "key>group"],
        # The same with as-of encodings: the group's posterior at the row's time.
        "time, hierarchy": ["--columns", "key,group", "--hierarchy", "key>group",
                            "--time-column", "t"],
        "loo": ["--method", "loo"],
    }
    for method, extra in methods.items():
        out = work / method
        columns = [] if "--columns" in extra else ["--columns", "key"]
        run = subprocess.run(
            [binary, "-q", "encode", "--train", str(work / "train.parquet"), "--target", "y",
             *columns, "--readers", "mean,sd", "--score", str(work / "test.parquet"),
             "--out", str(out), "--replace", *extra],
            capture_output=True, text=True)
        if run.returncode != 0:
            print(json.dumps({"method": method, "refused": run.stderr.strip()}))
            continue
        enc_train = pd.read_parquet(out / "train_encoded.parquet")[["key_mean", "key_sd"]]
        enc_test = pd.read_parquet(out / "scored.parquet")[["key_mean", "key_sd"]]
        g_in, g_out = gains(enc_train.values, train.y.values, enc_test.values, test.y.values)
        # Each column alone too, against one column of noise: a leak shows in one.
        alone = {c: gains(enc_train[[c]].values, train.y.values, enc_test[[c]].values,
                          test.y.values)[0] for c in enc_train.columns}
        print(json.dumps({"method": method, "in_sample_gain": g_in, "held_out_gain": g_out,
                          "in_sample_gain_alone": alone}))
    # The leaky reference: per-level means of all training rows, joined back.
    means = train.groupby("key").y.mean()
    g_in, g_out = gains(train.key.map(means).values[:, None], train.y.values,
                        test.key.map(means).fillna(train.y.mean()).values[:, None], test.y.values)
    print(json.dumps({"method": "in-sample mean (leaky reference)", "in_sample_gain": g_in,
                      "held_out_gain": g_out}))
    sds = train.groupby("key").y.std().fillna(0)
    both = lambda rows: np.c_[rows.key.map(means).fillna(train.y.mean()).values,
                              rows.key.map(sds).fillna(0).values]
    g_in, g_out = gains(both(train), train.y.values, both(test), test.y.values)
    print(json.dumps({"method": "in-sample mean and sd (leaky reference, 2 columns)",
                      "in_sample_gain": g_in, "held_out_gain": g_out}))


if __name__ == "__main__":
    main()
