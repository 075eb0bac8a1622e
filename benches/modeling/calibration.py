"""Are posterity's posteriors honest on real data? Each level's posterior (encode's fitted
prior, as written to its encodings table) predicts what the level's held-out rows will show;
this counts how often the held-out rows land inside the central 50 % and 90 % predictive
intervals.

* 0/1 targets (Beta): the held-out successes of a level with m held-out rows follow the
  beta-binomial(m, a_n, b_n) predictive; discrete, so the probability integral transform is
  randomised (Czado, Gneiting and Held, "Predictive model assessment for count data",
  Biometrics 2009, from memory).
* Continuous targets (Normal-Inverse-Gamma): the held-out mean of m rows follows a Student-t
  with 2 alpha_n degrees of freedom, centre mu_n and scale sqrt(beta_n / alpha_n (1/kappa_n +
  1/m)) (the conjugate predictive: Murphy, "Conjugate Bayesian analysis of the Gaussian
  distribution", 2007, section 7.6, from memory).

Two splits per task: *exchangeable* (a random half of the training rows fits, the other half
is held out, three seeds: the model's own assumptions) and *in time* (the training rows fit,
the task's later rows are held out: what a user scoring new data meets), the latter also with
recency weights chosen per key (`--half-life fitted`), which discount old rows and so widen
the posteriors of levels that drift. Every level seen in the fitting part with at least one
held-out row counts once. In brackets: the binomial standard error of the 90 % share.

`--check TASK:KEY ...` prints the exchangeable coverage of each key as JSON lines (the
calibration test reads them).

    POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \
        benches/modeling/calibration.py [baseball bundesliga ...]
"""
import json
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import TASKS, posterity_bin, split, task_named, time_of  # noqa: E402


def posteriors(fit, y, key, work, time=None):
    """Each level's posterior under encode's fitted prior: level -> struct fields. With the
    rows' `time`, recency-weighted (`--half-life fitted`, out-of-fold encodings)."""
    train = pd.DataFrame({key: fit.values, "y": y.values})
    weighted = []
    if time is not None:
        train["t"] = time.values
        weighted = ["--time-column", "t", "--method", "kfold", "--half-life", "fitted"]
    train.to_parquet(work / "fit.parquet", index=False)
    out = work / "out"
    subprocess.run([posterity_bin(), "-q", "encode", "--train", str(work / "fit.parquet"),
                    "--target", "y", "--columns", key, "--out", str(out), "--replace",
                    *weighted], check=True, stdout=subprocess.DEVNULL)
    table = pd.read_parquet(out / "encodings" / f"{key}.parquet")
    return dict(zip(table[key].astype(str), table["p"]))


def pit_beta(p, held, rng, evidence=1.0):
    """`evidence` multiplies the level's data (2: every row counted twice, the control)."""
    m, s = len(held), held.sum()
    a = p["a0"] + evidence * p["successes"]
    b = p["b0"] + evidence * (p["trials"] - p["successes"])
    lower = stats.betabinom.cdf(s - 1, m, a, b) if s > 0 else 0.0
    upper = stats.betabinom.cdf(s, m, a, b)
    return lower + rng.uniform() * (upper - lower)


def pit_nig(p, held, evidence=1.0):
    m, n, m2 = len(held), evidence * p["n"], evidence * p["m2"]
    kappa = p["kappa0"] + n
    d = p["mean"] - p["mu0"]
    mu = p["mu0"] + d * n / kappa
    alpha = p["alpha0"] + 0.5 * n
    beta = p["beta0"] + 0.5 * m2 + 0.5 * d * d * p["kappa0"] * n / kappa
    scale = np.sqrt(beta / alpha * (1 / kappa + 1 / m))
    return stats.t.cdf((held.mean() - mu) / scale, 2 * alpha)


def pits(kind, fit_keys, fit_y, held_keys, held_y, key, work, rngs, time=None):
    """PIT values of the held-out levels under posteriors fitted once, for each evidence
    factor in `rngs` (factor -> its own random stream for the randomised PIT)."""
    post = posteriors(fit_keys, fit_y, key, work, time)
    out = {evidence: [] for evidence in rngs}
    for level, held in pd.Series(held_y.values).groupby(held_keys.values):
        p = post.get(str(level))
        if p is None:
            continue
        held = held.to_numpy(dtype=float)
        for evidence, rng in rngs.items():
            out[evidence].append(pit_beta(p, held, rng, evidence) if kind == "binary"
                                 else pit_nig(p, held, evidence))
    return {evidence: np.array(u) for evidence, u in out.items()}


def coverage(u):
    """Shares of PIT values inside the central 50 % and 90 % intervals, and the binomial
    standard error of the 90 % share."""
    inside90 = np.mean((u >= 0.05) & (u <= 0.95))
    return (np.mean((u >= 0.25) & (u <= 0.75)), inside90,
            np.sqrt(inside90 * (1 - inside90) / len(u)))


def exchangeable(kind, tr, ytr, key, work, rngs):
    """PIT values of three random halves of the training rows, each scored by the other,
    per evidence factor in `rngs`."""
    out = [pits(kind, tr[key][half], ytr[half], tr[key][~half], ytr[~half], key, work, rngs)
           for half in (np.random.default_rng(seed).random(len(tr)) < 0.5 for seed in range(3))]
    return {evidence: np.concatenate([u[evidence] for u in out]) for evidence in rngs}


def check(pairs):
    """`--check TASK:KEY ...`: the exchangeable coverage of each key as JSON lines (the
    calibration test in tests/it/calibration.rs reads them), with a control: the same
    posteriors with every row counted twice (an over-confident model the test must catch)."""
    for pair in pairs:
        prefix, key = pair.split(":")
        name, loader, kind = task_named(prefix)
        _, _, tr, _, ytr, _ = split(loader)
        with tempfile.TemporaryDirectory() as d:
            rngs = {1.0: np.random.default_rng(0), 2.0: np.random.default_rng(0)}
            both = exchangeable(kind, tr, ytr, key, Path(d), rngs)
            u, twice = both[1.0], both[2.0]
        c50, c90, se90 = coverage(u)
        print(json.dumps(dict(task=name, key=key, pits=len(u), c50=c50, c90=c90, se90=se90,
                              c90_counted_twice=coverage(twice)[1])), flush=True)


def main():
    if sys.argv[1:2] == ["--check"]:
        return check(sys.argv[2:])
    prefixes = sys.argv[1:] or list(TASKS)
    print("| task | key | levels | exchangeable: 50 % / 90 % | in time: 50 % / 90 % | in time, "
          "`--half-life fitted`: 50 % / 90 % |")
    print("|---|---|---|---|---|---|")
    for prefix in prefixes:
        name, loader, kind = task_named(prefix)
        keys, _, tr, te, ytr, yte = split(loader)
        yte = pd.Series(yte, index=te.index)
        for key in keys:
            with tempfile.TemporaryDirectory() as d:
                work = Path(d)
                rng = np.random.default_rng(0)
                mixed = exchangeable(kind, tr, ytr, key, work, {1.0: rng})[1.0]
                later = pits(kind, tr[key], ytr, te[key], yte, key, work, {1.0: rng})[1.0]
                weighted = pits(kind, tr[key], ytr, te[key], yte, key, work, {1.0: rng},
                                time_of(name, tr))[1.0]
            cells = " | ".join(f"{c50:.2f} / {c90:.2f} (±{se:.2f})" for c50, c90, se in
                               map(coverage, (mixed, later, weighted)))
            print(f"| {name.split(' ')[0]} | {key} | {len(later)} | {cells} |", flush=True)


if __name__ == "__main__":
    main()
