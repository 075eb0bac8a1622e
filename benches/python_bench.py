"""posterity from Python against the Rust shell, same data, same machine, one run.

    benches/python_bench.sh [ROWS] [LEVELS]

Queries (the Parquet file of `cargo bench --bench fit`, read by each engine in
each run, so both include the same decoding):

* fit: one Beta posterior per level, summed through a reader so nothing is pruned;
* join: the rows joined back to the encodings (`rows LEFT JOIN enc`, as users
  write it) and a reader per row;
* encode from a pandas DataFrame against encode from the Parquet file;
* scoring the rows with the bundle (`Bundle.score`) against a pandas merge written
  by hand (the posterior mean from the bundle's per-level numbers).

Prints one JSON object of medians (seconds) over RUNS runs.
"""

import json
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import datafusion
import pandas as pd
import pyarrow.parquet as pq

import posterity

FIT = "SELECT SUM(posterior_mean(p)) FROM (SELECT key, beta_posterior(y) AS p FROM d GROUP BY key)"
JOIN = ("SELECT SUM(posterior_mean(e.p)) FROM d LEFT JOIN "
        "(SELECT key, beta_posterior(y) AS p FROM d GROUP BY key) e ON e.key = d.key")
RUNS = 5


def median_time(f, runs=RUNS):
    times = []
    for _ in range(runs):
        start = time.perf_counter()
        f()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def shell_time(binary, data, sql):
    """Median of the shell's own timing of the statement (its feedback line), so
    process start-up is not counted, as it is not on the Python side."""
    # A statement that stores its one-row result gets a timing line at any output.
    statement = f"CREATE OR REPLACE TABLE r AS {sql}"
    out = subprocess.run([binary, "-t", f"d={data}", *sum([["-c", statement]] * RUNS, [])],
                         capture_output=True, text=True, check=True)
    times = []
    for line in out.stderr.splitlines():
        # "= stored 1 row in table r (1.234 s)" or "(523 ms)"
        if line.startswith("=") and "(" in line:
            value = line.rsplit("(", 1)[1].rstrip(")")
            number, unit = value.split()
            times.append(float(number) / (1000 if unit == "ms" else 1))
    return statistics.median(times)


def main():
    binary, data = sys.argv[1], sys.argv[2]
    ctx = datafusion.SessionContext()
    posterity.register(ctx)
    ctx.register_parquet("d", data)
    result = {
        "rows": pq.ParquetFile(data).metadata.num_rows,
        "python_fit": median_time(lambda: ctx.sql(FIT).collect()),
        "shell_fit": shell_time(binary, data, FIT),
        "python_join": median_time(lambda: ctx.sql(JOIN).collect()),
        "shell_join": shell_time(binary, data, JOIN),
    }
    frame = pd.read_parquet(data, columns=["key", "key2", "y"])
    with tempfile.TemporaryDirectory() as d:
        small = Path(d) / "train.parquet"
        frame.to_parquet(small, index=False)
        options = dict(target="y", columns=["key", "key2"], readers=["mean"], indicators=0)
        result["encode_from_parquet"] = median_time(lambda: posterity.encode(str(small), **options),
                                                    runs=3)
        result["encode_from_pandas"] = median_time(lambda: posterity.encode(frame, **options),
                                                   runs=3)
        enc = posterity.encode(str(small), **options)
        bundle = enc.bundle
        rows = frame.head(1_000_000)[["key", "key2"]]
        result["bundle_score_1m"] = median_time(lambda: bundle.score(rows))
        # The same posterior means by hand: one merge per key on the per-level table.
        doc = json.loads(bundle.to_json())

        def by_hand():
            out = rows.copy()
            for key in ["key", "key2"]:
                column = doc["columns"][key]
                scale = column.get("score_scale", 1.0)
                levels = pd.DataFrame.from_dict(column["levels"], orient="index")
                means = ((levels.a0 + scale * levels.successes)
                         / (levels.a0 + levels.b0 + scale * levels.trials)).rename(f"{key}_mean")
                prior = column["prior"]
                out = out.merge(means, left_on=key, right_index=True, how="left")
                out[f"{key}_mean"] = out[f"{key}_mean"].fillna(
                    prior["a0"] / (prior["a0"] + prior["b0"]))
            return out

        result["pandas_merge_1m"] = median_time(by_hand)
    result["ratio_fit_python_over_shell"] = result["python_fit"] / result["shell_fit"]
    result["ratio_join_python_over_shell"] = result["python_join"] / result["shell_join"]
    print(json.dumps(result, indent=1))


if __name__ == "__main__":
    main()
