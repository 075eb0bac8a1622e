"""The same logical work as benches/fit.rs, written by hand in the tools users would
pick instead: DuckDB (SQL), polars and pandas (DataFrames). Reads the shared Parquet
data set, holds it in memory, and prints the median of 5 runs per task.

Run through benches/compare.sh, which creates the virtual environment.
"""
import json
import statistics
import sys
import time

import duckdb
import pandas as pd
import polars as pl

A, B = 0.5, 0.5  # the Jeffreys prior, as beta_posterior's default


def median(fn, runs):
    times = []
    for _ in range(runs):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def fold(keys):
    # Any deterministic 5-way split of rows serves the timing.
    return keys.str.len() % 5


def main(path, out, runs=5):
    results = {}
    con = duckdb.connect()
    con.execute(f"CREATE TABLE t AS SELECT * FROM read_parquet('{path}')")
    con.execute("CREATE TABLE enc AS SELECT key, COUNT(*) AS n, SUM(y) AS s FROM t GROUP BY key")
    duck = {
        "baseline": "SELECT key, COUNT(*), SUM(y) FROM t GROUP BY key",
        "fit": f"SELECT key, COUNT(*) AS n, SUM(y) AS s, (SUM(y) + {A}) / (COUNT(*) + {A + B}) AS mean FROM t GROUP BY key",
        "fit_nig": "SELECT key, COUNT(*), AVG(x), VAR_POP(x) * COUNT(*) FROM t GROUP BY key",
        "join_engine": f"SELECT SUM((e.s + {A}) / (e.n + {A + B})) FROM t LEFT JOIN enc e USING (key)",
        "fit_join": f"SELECT SUM((e.s + {A}) / (e.n + {A + B})) FROM t LEFT JOIN (SELECT key, COUNT(*) AS n, SUM(y) AS s FROM t GROUP BY key) e USING (key)",
        "oof5": f"""WITH f AS (SELECT key, y, hash(key) % 5 AS fold FROM t),
            tot AS (SELECT key, COUNT(*) AS n, SUM(y) AS s FROM f GROUP BY key),
            per AS (SELECT key, fold, COUNT(*) AS n, SUM(y) AS s FROM f GROUP BY key, fold)
            SELECT SUM((tot.s - per.s + {A}) / (tot.n - per.n + {A + B})) FROM f JOIN tot USING (key)
            JOIN per ON per.key = f.key AND per.fold = f.fold""",
    }
    for name, sql in duck.items():
        results[f"duckdb:{name}"] = median(lambda: con.execute(sql).fetchall(), runs)

    df = pl.read_parquet(path)
    enc = df.group_by("key").agg(pl.len().alias("n"), pl.col("y").sum().alias("s"))

    def pl_fit():
        return df.group_by("key").agg(pl.len().alias("n"), pl.col("y").sum().alias("s")).with_columns(
            ((pl.col("s") + A) / (pl.col("n") + A + B)).alias("mean"))

    def pl_oof():
        f = df.select("key", "y").with_columns((pl.col("key").hash() % 5).alias("fold"))
        tot = f.group_by("key").agg(pl.len().alias("n"), pl.col("y").sum().alias("s"))
        per = f.group_by("key", "fold").agg(pl.len().alias("nf"), pl.col("y").sum().alias("sf"))
        j = f.join(tot, on="key").join(per, on=["key", "fold"])
        return j.select(((pl.col("s") - pl.col("sf") + A) / (pl.col("n") - pl.col("nf") + A + B)).sum())

    polars = {
        "baseline": lambda: df.group_by("key").agg(pl.len(), pl.col("y").sum()),
        "fit": pl_fit,
        "fit_nig": lambda: df.group_by("key").agg(pl.len(), pl.col("x").mean().alias("m"), pl.col("x").var(ddof=0).alias("v")),
        "join_engine": lambda: df.join(enc, on="key", how="left").select(((pl.col("s") + A) / (pl.col("n") + A + B)).sum()),
        "fit_join": lambda: df.join(pl_fit(), on="key", how="left").select(pl.col("mean").sum()),
        "oof5": pl_oof,
    }
    for name, fn in polars.items():
        results[f"polars:{name}"] = median(fn, runs)

    pdf = pd.read_parquet(path)
    penc = pdf.groupby("key")["y"].agg(["count", "sum"])

    def pd_fit():
        g = pdf.groupby("key")["y"].agg(["count", "sum"])
        return (g["sum"] + A) / (g["count"] + A + B)

    pandas = {
        "baseline": lambda: pdf.groupby("key")["y"].agg(["count", "sum"]),
        "fit": pd_fit,
        "fit_nig": lambda: pdf.groupby("key")["x"].agg(["count", "mean", "var"]),
        "join_engine": lambda: pdf["key"].map((penc["sum"] + A) / (penc["count"] + A + B)).sum(),
        "fit_join": lambda: pdf["key"].map(pd_fit()).sum(),
    }
    for name, fn in pandas.items():
        results[f"pandas:{name}"] = median(fn, runs)

    with open(out, "w") as f:
        json.dump(results, f, indent=1)
    for k, v in results.items():
        print(f"{k:28s} {v:8.3f} s")


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2])
