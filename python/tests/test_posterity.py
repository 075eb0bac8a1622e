"""posterity from Python: the same numbers as the shell, tables in and out, bad input.

Run by .ci/run (python/tests/run.sh): a fresh virtual environment, `pip install
./python[test]`, then pytest. The shell binary (target/debug or target/release,
or POSTERITY_BIN) is the reference for every number.
"""

import datetime
import json
import math
import os
import subprocess
from pathlib import Path

import datafusion
import numpy as np
import pandas as pd
import polars as pl
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
import pytest
from datafusion import col, lit

import posterity

ROOT = Path(__file__).resolve().parents[2]
SAMPLE = ROOT / "demo/sample/appointments.csv"
PETS = ROOT / "demo/sample/pets.csv"


def shell_binary() -> str:
    for candidate in [os.environ.get("POSTERITY_BIN"), ROOT / "target/release/posterity",
                      ROOT / "target/debug/posterity"]:
        if candidate and Path(candidate).exists():
            return str(candidate)
    pytest.fail("build the shell first: cargo build")


def shell_rows(sql: str) -> list[dict]:
    out = subprocess.run(
        [shell_binary(), "-q", "-t", f"a={SAMPLE}", "-t", f"pets={PETS}", "-c", sql, "--format",
         "json"], check=True, capture_output=True, text=True).stdout
    return json.loads(out)


def python_rows(ctx, sql: str) -> list[dict]:
    return ctx.sql(sql).to_pandas().to_dict("records")


@pytest.fixture(scope="module")
def ctx():
    c = datafusion.SessionContext()
    posterity.register(c)
    c.register_csv("a", str(SAMPLE))
    c.register_csv("pets", str(PETS))
    return c


def same(a, b, what):
    """Equal, with floats within 1e-12 relative (identical for integers)."""
    assert len(a) == len(b), what
    for i, (ra, rb) in enumerate(zip(a, b)):
        assert set(ra) == set(rb), f"{what}: columns {set(ra)} vs {set(rb)}"
        for k in ra:
            x, y = ra[k], rb[k]
            if isinstance(x, float) or isinstance(y, float):
                x, y = float(x), float(y)
                if math.isnan(x) and math.isnan(y):
                    continue
                assert abs(x - y) <= 1e-12 * max(abs(x), abs(y), 1e-300), f"{what} row {i} {k}: {x} vs {y}"
            else:
                assert x == y, f"{what} row {i} {k}: {x!r} vs {y!r}"


# Every family, readers, pooling, fit_prior and windows: the same SQL in both.
SAME_AS_SHELL = {
    "beta readers": """SELECT breed, posterior_mean(p) AS m, posterior_sd(p) AS s,
        posterior_quantile(p, 0.05) AS q05, posterior_prob_above(p, 0.2) AS above,
        posterior_data_weight(p) AS n
        FROM (SELECT breed, beta_posterior(no_show, beta_prior(2, 18)) AS p FROM a GROUP BY breed)
        ORDER BY breed""",
    "gamma": """SELECT breed, posterior_mean(p) AS m, posterior_quantile(p, 0.95) AS q95
        FROM (SELECT breed, gamma_posterior(visits, years_enrolled, gamma_prior(2, 1)) AS p
              FROM pets GROUP BY breed) ORDER BY breed""",
    "nig": """SELECT clinic, posterior_mean(p) AS m, posterior_sd(p) AS s
        FROM (SELECT clinic, nig_posterior(amount, nig_prior(90, 1, 2, 200)) AS p FROM a
              WHERE amount IS NOT NULL GROUP BY clinic) ORDER BY clinic""",
    "dirichlet": """SELECT clinic, posterior_mean(p, 'no_show') AS m
        FROM (SELECT clinic, dirichlet_posterior(outcome,
              dirichlet_prior(['attended', 'late_cancellation', 'no_show', 'rescheduled'], 1)) AS p FROM a GROUP BY clinic)
        ORDER BY clinic""",
    "fit_prior": """SELECT posterior_mean(q) AS m, posterior_data_weight(q) AS n
        FROM (SELECT fit_prior(p) AS q FROM (SELECT beta_posterior(no_show) AS p FROM a
              GROUP BY postcode_area))""",
    "out-of-fold": """SELECT appointment_id, posterior_mean(posterior_subtract(e.p, f.p)) AS m
        FROM (SELECT breed, fold_of(appointment_id, 5, 0) AS fold, beta_posterior(no_show) AS p
              FROM a GROUP BY breed, fold_of(appointment_id, 5, 0)) f
        JOIN (SELECT breed, beta_posterior(no_show) AS p FROM a GROUP BY breed) e USING (breed)
        JOIN a ON a.breed = f.breed AND fold_of(a.appointment_id, 5, 0) = f.fold
        ORDER BY appointment_id""",
    "as-of window": """SELECT appointment_id, posterior_mean(beta_posterior(no_show, beta_prior(2, 18))
        OVER (PARTITION BY breed ORDER BY day RANGE BETWEEN 30 PRECEDING AND 0 PRECEDING)) AS m
        FROM a ORDER BY appointment_id""",
    # The window function as-of encodings use, through the foreign-function interface.
    "as-of pool": """SELECT breed, day, posterior_mean(COALESCE(posterior_pool_before(p, day, 7)
            OVER (PARTITION BY breed ORDER BY day), beta_prior(2, 18))) AS m
        FROM (SELECT breed, day, beta_posterior(no_show, beta_prior(2, 18)) AS p FROM a
              GROUP BY breed, day) ORDER BY breed, day""",
}


@pytest.mark.parametrize("name", list(SAME_AS_SHELL))
def test_sql_equals_the_shell(ctx, name):
    sql = SAME_AS_SHELL[name]
    same(python_rows(ctx, sql), shell_rows(sql), name)


def test_dataframe_api_and_windows(ctx):
    fns = posterity.register(ctx)
    df = ctx.table("a").aggregate(
        [col("breed")], [fns.beta_posterior(col("no_show"), fns.beta_prior(lit(2), lit(18)))
                         .alias("p")])
    got = df.select(col("breed"), fns.posterior_mean(col("p")).alias("m")).sort(col("breed"))
    want = shell_rows("SELECT breed, posterior_mean(beta_posterior(no_show, beta_prior(2, 18))) "
                      "AS m FROM a GROUP BY breed ORDER BY breed")
    same(got.to_pandas().to_dict("records"), want, "DataFrame API")
    assert "beta_posterior" in posterity.doc("beta_posterior")
    assert "posterior_mean" in posterity.functions()


# ------------------------------------------------------------------ encode

OPTIONS = dict(columns=["breed", "postcode_area", "vet"], interactions=[["breed", "clinic"]],
               readers=["mean", "sd", "q05"])


def shell_encode(out: Path, extra=()):
    subprocess.run(
        [shell_binary(), "-q", "encode", "--train", str(SAMPLE), "--target", "no_show",
         "--columns", "breed,postcode_area,vet", "--interactions", "breed:clinic",
         "--readers", "mean,sd,q05", "--score", str(SAMPLE), "--out", str(out), *extra],
        check=True, capture_output=True)


def table_rows(t: pa.Table) -> list[dict]:
    return t.to_pylist()


def test_encode_equals_the_shell(tmp_path):
    shell_encode(tmp_path / "shell")
    enc = posterity.encode(SAMPLE, target="no_show", score=SAMPLE, **OPTIONS)
    same(table_rows(enc.train_encoded), table_rows(pq.read_table(tmp_path / "shell/train_encoded.parquet")),
         "train_encoded")
    same(table_rows(enc.scored), table_rows(pq.read_table(tmp_path / "shell/scored.parquet")), "scored")
    for key in ["breed", "postcode_area", "vet", "breed_x_clinic"]:
        want = pq.read_table(tmp_path / f"shell/encodings/{key}.parquet").drop_columns(["p"])
        same(table_rows(enc.encodings[key].drop_columns(["p"])), table_rows(want), key)
    # Written by Python: the shell's files, byte for byte.
    enc.write(tmp_path / "python")
    for f in ["train_encoded.parquet", "scored.parquet", "bundle.json", "encodings/breed.parquet"]:
        assert (tmp_path / "python" / f).read_bytes() == (tmp_path / "shell" / f).read_bytes(), f
    assert [s["key"] for s in enc.summary] == ["breed", "postcode_area", "vet", "breed_x_clinic"]
    assert enc.report is None
    # Printed, the scored rows per key follow the summary, as the shell prints them.
    printed = str(enc).splitlines()
    at = printed.index(next(line for line in printed if line.startswith("scored rows")))
    assert printed[at + 2].split() == ["breed", "3000", "3000", "0", "0"], printed


def test_a_gzip_file_encodes_like_the_file_inside(tmp_path):
    import gzip
    packed = tmp_path / "appointments.csv.gz"
    packed.write_bytes(gzip.compress(SAMPLE.read_bytes()))
    plain = posterity.encode(SAMPLE, target="no_show", score=SAMPLE, **OPTIONS)
    enc = posterity.encode(packed, target="no_show", score=packed, **OPTIONS)
    same(table_rows(enc.train_encoded), table_rows(plain.train_encoded), "train_encoded")
    same(table_rows(enc.scored), table_rows(plain.scored), "scored")


def test_csv_files_read_with_the_shells_csv_options(tmp_path):
    # The same rows as the sample, written with ';', NA for the missing targets, no
    # header and a fraction after the first rows of an integer-looking column: each
    # read with its option gives the sample's encodings; without them the errors name
    # the options.
    frame = pd.read_csv(SAMPLE, dtype={"breed": "string", "postcode_area": "string",
                                       "vet": "string"})
    frame.loc[::7, "no_show"] = None
    frame["weight"] = ["1"] * (len(frame) - 1) + ["1.5"]
    plain = tmp_path / "plain.csv"
    frame.to_csv(plain, index=False)
    odd = tmp_path / "odd.csv"
    frame.to_csv(odd, index=False, sep=";", na_rep="NA", header=False)
    want = posterity.encode(plain, target="no_show", columns=["breed", "vet"],
                            exposure="weight", csv_infer_rows="all")
    names = list(frame.columns)
    got = posterity.encode(odd, target=f"column_{names.index('no_show') + 1}",
                           columns=[f"column_{names.index(c) + 1}" for c in ["breed", "vet"]],
                           exposure=f"column_{names.index('weight') + 1}",
                           csv_no_header=True, csv_delimiter=";", csv_null="NA",
                           csv_infer_rows="all")
    want_rows = want.train_encoded.column("breed_mean").to_pylist()
    got_rows = got.train_encoded.column(
        f"column_{names.index('breed') + 1}_mean").to_pylist()
    assert got_rows == want_rows
    with pytest.raises(posterity.Error) as e:
        frame.to_csv(tmp_path / "na.csv", index=False, na_rep="NA")
        posterity.encode(tmp_path / "na.csv", target="no_show", columns=["breed"])
    assert "csv_null NA" in str(e.value) and "--" not in str(e.value), e.value
    with pytest.raises(posterity.Error) as e:
        posterity.encode(plain, target="no_show", columns=["breed"], exposure="weight")
    assert "csv_infer_rows all" in str(e.value), e.value
    for options, fragments in [
        ({"csv_delimiter": ";;"}, ["csv_delimiter must be one character", "';;'"]),
        ({"csv_infer_rows": 0}, ["csv_infer_rows", "'0' is not a number of rows from 1"]),
        ({"csv_infer_rows": "some"}, ["csv_infer_rows", "'some'"]),
        ({"csv_no_header": "yes"}, ["csv_no_header must be True or False"]),
        ({"csv_text": 3}, ["csv_text must be a column name or a list of them"]),
    ]:
        with pytest.raises(posterity.Error) as e:
            posterity.encode(plain, target="no_show", columns=["breed"], **options)
        for f in fragments:
            assert f in str(e.value), f"{f!r} not in {e.value}"
    # On tables already read the options would do nothing: refused by name.
    with pytest.raises(posterity.Error) as e:
        posterity.encode(frame, target="no_show", columns=["breed"], csv_null="NA")
    assert "csv_null is for CSV files given by path" in str(e.value), e.value


def test_a_dataset_pyarrow_wrote_partitioned_reads_like_the_file(tmp_path):
    # pyarrow writes a dataset as clinic=.../month=.../part.parquet (a missing clinic as
    # __HIVE_DEFAULT_PARTITION__). Given as a path, the clinic key stays text, the
    # missing clinic is a NULL key (the prior), and the whole-number month is a number a
    # half-life can count: the per-level encodings equal the flat table's.
    table = pacsv.read_csv(
        SAMPLE, convert_options=pacsv.ConvertOptions(
            column_types={"clinic": pa.string(), "day": pa.int64()}))
    clinic = table.column("clinic").to_pylist()
    clinic[:40] = [None] * 40
    table = table.set_column(table.schema.get_field_index("clinic"), "clinic",
                             pa.array(clinic, pa.string()))
    month = [d // 30 for d in table.column("day").to_pylist()]
    table = table.append_column("month", pa.array(month, pa.int64()))
    root = tmp_path / "dataset"
    pq.write_to_dataset(table, root, partition_cols=["clinic", "month"])
    assert (root / "clinic=__HIVE_DEFAULT_PARTITION__").is_dir()
    options = dict(target="no_show", columns=["clinic", "breed"], time_column="month",
                   method="kfold", half_life=2)
    flat = posterity.encode(table, **options)
    parted = posterity.encode(root, **options)
    for key in ["clinic", "breed"]:
        want = sorted(flat.encodings[key].drop_columns(["p"]).to_pylist(), key=str)
        got = sorted(parted.encodings[key].drop_columns(["p"]).to_pylist(), key=str)
        same(got, want, key)
    assert [s["rows"] for s in parted.summary] == [s["rows"] for s in flat.summary]
    assert parted.summary[0]["levels"] == 12


def test_fitted_half_life_is_reported_per_key():
    enc = posterity.encode(SAMPLE, target="no_show", columns=["breed", "vet"], time_column="day",
                           half_life="fitted")
    for s in enc.summary:
        assert s["recency"].startswith(("half-life", "no half-life")), s
        assert (s["half_life"] is None) == s["recency"].startswith("no half-life"), s
    numbers = posterity.encode(SAMPLE, target="no_show", columns=["breed"], time_column="day",
                               half_life=30)
    assert numbers.summary[0]["half_life"] == 30


def test_summary_warnings_name_keyword_arguments():
    enc = posterity.encode(SAMPLE, target="no_show", columns=["clinic"])
    warnings = enc.summary[0]["warnings"]
    assert any("consider prior with numbers" in w for w in warnings), warnings
    assert not any("--" in w for w in warnings), warnings


def test_durations_count_days_of_a_date_time_column():
    # A Timedelta half-life or horizon on a date column is that many days: the same
    # encodings as the number of days.
    base = dict(target="no_show", columns=["breed"], time_column="booked_on")
    by_number = posterity.encode(SAMPLE, half_life=14, horizon=3, **base)
    for half_life, horizon in [(pd.Timedelta(weeks=2), pd.Timedelta(days=3)),
                               (datetime.timedelta(days=14), np.timedelta64(72, "h"))]:
        by_duration = posterity.encode(SAMPLE, half_life=half_life, horizon=horizon, **base)
        assert by_duration.train_encoded.equals(by_number.train_encoded)
        assert [s["half_life"] for s in by_duration.summary] == [14.0]


def test_horizon_is_reported_per_key():
    enc = posterity.encode(SAMPLE, target="no_show", columns=["breed"], time_column="day",
                           horizon=30)
    assert enc.summary[0]["horizon"] == 30
    # In a Python user's words: the keyword, not the shell's flag.
    assert enc.summary[0]["horizon_reason"] == "horizon 30 (horizon)"
    assert "(horizon)" in str(enc)
    later = pa.table({"breed": ["breed_001"] * 3, "day": [370, 380, 400]})
    matched = posterity.encode(SAMPLE, target="no_show", columns=["breed"], time_column="day",
                               horizon="matched", score=later)
    # Days past the newest training day (364): 6, 16, 36; their median.
    assert matched.summary[0]["horizon"] == 16
    assert matched.summary[0]["horizon_reason"].startswith("horizon 16"), matched.summary


def test_default_readers_follow_each_keys_spread():
    # Levels of `volatile` have standard deviations from 0.01 to 1.3 (a fixed cycle of
    # offsets, no random numbers); levels of `calm` all share one spread.
    offsets = [-1.0, -0.5, 0.0, 0.5, 1.0, 0.25, -0.25, 0.75]
    rows = {"volatile": [], "calm": [], "y": []}
    for i in range(4000):
        v, c = i % 40, (i // 40) % 40
        rows["volatile"].append(f"v{v}")
        rows["calm"].append(f"c{c}")
        rows["y"].append(10.0 + v / 10 + 0.02 * 100 ** (v / 39) * offsets[(i // 7) % 8]
                         + 0.3 * offsets[(i // 3) % 8])
    table = pa.table(rows)
    enc = posterity.encode(table, target="y", columns=["volatile", "calm"], score=table)
    by_key = {s["key"]: s for s in enc.summary}
    assert by_key["volatile"]["readers"] == ["mean", "sd"], by_key["volatile"]
    assert by_key["calm"]["readers"] == ["mean"], by_key["calm"]
    assert by_key["volatile"]["prior"]["alpha0"] <= 2 < by_key["calm"]["prior"]["alpha0"]
    assert "volatile_sd" in enc.scored.column_names and "calm_sd" not in enc.scored.column_names
    served = posterity.Bundle.from_json(enc.bundle.to_json()).score(table.select(["volatile", "calm"]))
    # The bundle path computes the same formula outside the engine (1e-12, as in the shell's test).
    assert served.column("volatile_sd").to_pylist() == pytest.approx(
        enc.scored.column("volatile_sd").to_pylist(), rel=1e-12)
    given = posterity.encode(table, target="y", columns=["volatile", "calm"], readers=["mean"])
    assert "volatile_sd" not in given.train_encoded.column_names


def test_hierarchy_equals_the_shell(tmp_path):
    frame = pd.read_csv(SAMPLE, dtype={"postcode_area": "string"})
    frame["district"] = frame.postcode_area.str[:4]
    path = tmp_path / "nested.csv"
    frame.to_csv(path, index=False)
    # k-fold encodings, then as-of encodings (the rows' days given).
    for flags, options in [([], {}), (["--time-column", "day"], {"time_column": "day"})]:
        out = tmp_path / f"shell{len(flags)}"
        subprocess.run(
            [shell_binary(), "-q", "encode", "--train", str(path), "--target", "no_show",
             "--columns", "postcode_area,district", "--hierarchy", "postcode_area>district",
             "--score", str(path), "--out", str(out), *flags],
            check=True, capture_output=True)
        enc = posterity.encode(str(path), target="no_show", columns=["postcode_area", "district"],
                               hierarchy="postcode_area>district", score=str(path), **options)
        shell = pq.read_table(out / "train_encoded.parquet")
        assert enc.train_encoded.column("postcode_area_mean").to_pylist() == \
            shell.column("postcode_area_mean").to_pylist()
        by_key = {s["key"]: s for s in enc.summary}
        assert by_key["postcode_area"]["parent"] == "district"
        assert by_key["postcode_area"]["parent_strength"] > 0
    with pytest.raises(posterity.Error, match="is not CHILD>PARENT"):
        posterity.encode(str(path), target="no_show", columns=["postcode_area"],
                         hierarchy="postcode_area")
    with pytest.raises(posterity.Error, match="hierarchy"):
        posterity.encode(str(path), target="no_show", columns=["postcode_area"], hierarchy=3)


def test_update_equals_the_shells_refresh(tmp_path):
    """A refresh from Python (new rows as a pandas frame, the previous run as an Encoded
    result, a Bundle or its directory) gives the shell's `encode --update` numbers."""
    frame = pd.read_csv(SAMPLE, dtype={"breed": "string", "clinic": "string"})
    old, new = frame[frame.day < 200], frame[frame.day >= 200]
    old_path, new_path = tmp_path / "old.csv", tmp_path / "new.csv"
    old.to_csv(old_path, index=False)
    new.to_csv(new_path, index=False)
    shell = tmp_path / "shell"
    for args in (["--train", str(old_path), "--target", "no_show", "--columns", "breed,clinic",
                  "--out", str(shell / "old")],
                 ["--update", str(shell / "old"), "--train", str(new_path), "--score",
                  str(new_path), "--decay", "0.5", "--out", str(shell / "new")]):
        subprocess.run([shell_binary(), "-q", "encode", *args], check=True, capture_output=True)
    want = pq.read_table(shell / "new" / "scored.parquet").column("breed_mean").to_pylist()
    first = posterity.encode(str(old_path), target="no_show", columns=["breed", "clinic"])
    for previous in (first, first.bundle, shell / "old"):
        refreshed = posterity.update(previous, new, score=new, decay=0.5)
        assert refreshed.train_encoded is None
        assert refreshed.scored.index.equals(new.index)
        assert refreshed.scored["breed_mean"].tolist() == want
    assert refreshed.bundle.to_json() == posterity.Bundle.load(shell / "new").to_json()
    refreshed.write(tmp_path / "py")
    assert (tmp_path / "py" / "bundle.json").exists()
    with pytest.raises(posterity.Error, match="update: unknown option target"):
        posterity.update(first, new, target="no_show")
    with pytest.raises(posterity.Error, match=r"^update: decay 2 is out of range"):
        posterity.update(first, new, decay=2.0)
    with pytest.raises(posterity.Error, match="update: csv_null is for CSV files given by path"):
        posterity.update(first, new, csv_null="NA")
    with pytest.raises(posterity.Error, match="update: previous must be"):
        posterity.update(42, new)


def test_report_equals_the_shell(tmp_path):
    shell_encode(tmp_path / "shell", extra=["--report"])
    enc = posterity.encode(SAMPLE, target="no_show", score=SAMPLE, report=True, **OPTIONS)
    want = (tmp_path / "shell/report.html").read_text()
    assert enc.report == want
    enc.write(tmp_path / "python")
    assert (tmp_path / "python/report.html").read_text() == want
    with pytest.raises(posterity.Error, match="report"):
        posterity.encode(SAMPLE, target="no_show", report="yes", **OPTIONS)


def test_pandas_and_polars_in_and_out(tmp_path):
    frame = pd.read_csv(SAMPLE, dtype={"breed": "string", "postcode_area": "string", "vet": "string",
                                       "clinic": "string"})
    from_path = posterity.encode(SAMPLE, target="no_show", score=SAMPLE, **OPTIONS)
    from_pandas = posterity.encode(frame, target="no_show", score=frame, **OPTIONS)
    assert isinstance(from_pandas.train_encoded, pd.DataFrame)
    assert isinstance(from_pandas.encodings["breed"], pd.DataFrame)
    for c in ["breed_mean", "postcode_area_sd", "breed_x_clinic_q05", "vet_mean"]:
        assert from_pandas.train_encoded[c].tolist() == from_path.train_encoded.column(c).to_pylist(), c
        assert from_pandas.scored[c].tolist() == from_path.scored.column(c).to_pylist(), c
    from_polars = posterity.encode(pl.from_pandas(frame), target="no_show", **OPTIONS)
    assert isinstance(from_polars.train_encoded, pl.DataFrame)
    assert from_polars.train_encoded["breed_mean"].to_list() == from_path.train_encoded.column("breed_mean").to_pylist()
    # The bundle scores a pandas DataFrame in process as scored rows were.
    scored = from_path.bundle.score(frame)
    assert isinstance(scored, pd.DataFrame)
    for c in ["breed_mean", "breed_sd", "postcode_area_q05", "breed_x_clinic_mean"]:
        got, want = scored[c].tolist(), from_path.scored.column(c).to_pylist()
        assert all(abs(x - y) <= 1e-12 * abs(y) for x, y in zip(got, want)), c
    assert isinstance(from_path.bundle.score(pl.from_pandas(frame)), pl.DataFrame)
    # A polars LazyFrame, a pyarrow Dataset and a pandas frame indexed by a key give
    # the same numbers as the file.
    import pyarrow.dataset as pads
    want = from_path.train_encoded.column("breed_mean").to_pylist()
    lazy = posterity.encode(pl.from_pandas(frame).lazy(), target="no_show", **OPTIONS)
    assert isinstance(lazy.train_encoded, pl.DataFrame)
    assert lazy.train_encoded["breed_mean"].to_list() == want
    dataset = posterity.encode(pads.dataset(SAMPLE, format="csv"), target="no_show", **OPTIONS)
    assert dataset.train_encoded.column("breed_mean").to_pylist() == want
    indexed = posterity.encode(frame.set_index("breed"), target="no_show", **OPTIONS)
    assert indexed.train_encoded["breed_mean"].tolist() == want


def test_pandas_rows_come_back_with_their_index_and_types():
    """A pandas user splits a shuffled frame and assigns feature columns back to it, which
    pandas aligns by index: the rows must come back with their own index (a fresh 0..n one
    would put every value on another row without a word) and their column types."""
    frame = pd.read_csv(SAMPLE, dtype={"breed": "string", "clinic": "category"})
    frame["no_show"] = frame["no_show"].astype("boolean")
    frame.loc[frame.index[3], "no_show"] = pd.NA
    shuffled = frame.sample(frac=1.0, random_state=7)
    train, score = shuffled.iloc[:3000], shuffled.iloc[3000:3400]
    options = dict(target="no_show", columns=["breed", "clinic"], indicators=0)
    enc = posterity.encode(train, score=score, **options)
    plain = posterity.encode(pa.Table.from_pandas(train, preserve_index=False),
                             score=pa.Table.from_pandas(score, preserve_index=False), **options)
    for got, rows, want in [(enc.train_encoded, train, plain.train_encoded),
                            (enc.scored, score, plain.scored),
                            (enc.bundle.score(score), score, plain.scored)]:
        assert got.index.equals(rows.index)
        assert got[list(rows.columns)].dtypes.equals(rows.dtypes)
        assert got["no_show"].isna().sum() == rows["no_show"].isna().sum()
        again = rows.copy()
        again["breed_mean"] = got["breed_mean"]  # aligned by index, as pandas does
        assert again["breed_mean"].tolist() == want.column("breed_mean").to_pylist()
    # A named index stays the index; it was read as a column.
    indexed = posterity.encode(train.set_index("breed"), **options)
    assert indexed.train_encoded.index.name == "breed"
    assert indexed.train_encoded["breed_mean"].tolist() == plain.train_encoded.column("breed_mean").to_pylist()


def test_pandas_dates_and_categories():
    """What a pandas user has: keys and targets as the category dtype and the time as
    datetime64 (here in UTC, six hours into the day). Days count as the numeric day does;
    the bundle scores category keys as text."""
    frame = pd.read_csv(SAMPLE, dtype={"breed": "string"})
    by_day = posterity.encode(frame, target="no_show", columns=["breed"], time_column="day",
                              half_life=30, horizon=7)
    typed = frame.assign(breed=frame["breed"].astype("category"),
                         when=pd.to_datetime(frame["booked_on"]).dt.tz_localize("UTC")
                         + pd.Timedelta(hours=6))
    by_date = posterity.encode(typed, target="no_show", columns=["breed"], time_column="when",
                               half_life=30, horizon=7)
    want, got = by_day.train_encoded["breed_mean"], by_date.train_encoded["breed_mean"]
    assert len(want) == len(got) == len(frame)
    assert (want - got).abs().max() < 1e-12
    assert by_date.summary[0]["horizon"] == 7
    # read_csv leaves ISO dates as text: they count days as the dates they spell, and
    # durations apply; text that is no ISO date is refused with an example.
    assert pd.api.types.is_string_dtype(frame["booked_on"])
    by_text = posterity.encode(frame, target="no_show", columns=["breed"], time_column="booked_on",
                               half_life=pd.Timedelta(days=30), horizon=7)
    assert (by_text.train_encoded["breed_mean"] - want).abs().max() < 1e-12
    us_dates = frame.assign(booked_on=pd.to_datetime(frame["booked_on"]).dt.strftime("%m/%d/%Y"))
    with pytest.raises(posterity.Error, match="not ISO dates or times .for example '01/01/2025'"):
        posterity.encode(us_dates, target="no_show", columns=["breed"], time_column="booked_on")
    scored = by_date.bundle.score(typed.head(50))
    assert scored["breed_mean"].tolist() == by_day.bundle.score(frame.head(50))["breed_mean"].tolist()
    # A category target is read by its values: text classes, or 0/1.
    classes = posterity.encode(typed.assign(outcome=typed["outcome"].astype("category")),
                               target="outcome", columns=["breed"])
    assert classes.summary[0]["family"] == "dirichlet"
    flags = posterity.encode(typed.assign(no_show=typed["no_show"].astype("category")),
                             target="no_show", columns=["breed"])
    assert flags.summary[0]["family"] == "beta"


def test_category_key_comes_back_as_a_category():
    """A category key passes through to pandas as a category with its own levels. The engine
    may return a key's dictionary holding each value twice (seen with a text target on a few
    rows), which pandas refuses; the outputs hold each value once."""
    frame = pd.DataFrame({"clinic": pd.Categorical(["c6", "c1", "c7", "c44", "c46"]),
                          "outcome": ["kept", "missed", "kept", "kept", "missed"]})
    for extra in ({}, {"score": frame}):
        enc = posterity.encode(frame, target="outcome", columns=["clinic"], **extra)
        for out in [enc.train_encoded, enc.scored] if extra else [enc.train_encoded]:
            assert out["clinic"].dtype == "category"
            assert out["clinic"].tolist() == frame["clinic"].tolist()
            assert sorted(out["clinic"].cat.categories) == sorted(frame["clinic"].cat.categories)


def test_integer_keys_scored_as_floats_meet_their_levels():
    """pandas turns an integer column with a missing value into floats (106 becomes 106.0);
    scored that way, the rows still meet their levels, and NaN is a NULL key."""
    rng = np.random.default_rng(3)
    clinic = rng.integers(100, 110, 2000)
    train = pd.DataFrame({"clinic": clinic, "y": (rng.random(2000) < (clinic - 99) / 12).astype(int)})
    ints = train.head(50)
    floats = ints.assign(clinic=ints["clinic"].astype(float))
    floats.loc[floats.index[0], "clinic"] = np.nan
    nulls = ints.assign(clinic=ints["clinic"].astype("Int64"))
    nulls.loc[nulls.index[0], "clinic"] = pd.NA
    by_float = posterity.encode(train, target="y", columns=["clinic"], score=floats, indicators=0)
    by_null = posterity.encode(train, target="y", columns=["clinic"], score=nulls, indicators=0)
    assert by_float.scored["clinic_mean"].tolist() == by_null.scored["clinic_mean"].tolist()
    assert by_float.summary[0]["unseen_share"] == 0
    assert by_float.bundle.score(floats)["clinic_mean"].tolist() == by_float.scored["clinic_mean"].tolist()


def test_key_types_nulls_and_empty():
    rows = pa.table({
        "text": ["a", "b", None, "a", "b", "c"] * 50,
        "number": [1, 2, 2, None, 3, 1] * 50,
        "flag": [True, False, None, True, True, False] * 50,
        "y": [1, 0, 1, 0, 0, 1] * 50,
    })
    enc = posterity.encode(rows, target="y", columns=["text", "number", "flag"], score=rows,
                           readers=["mean"], indicators=0)
    t = enc.train_encoded
    assert t.num_rows == 300
    for c in ["text_mean", "number_mean", "flag_mean"]:
        assert t.column(c).null_count == 0
    # NULL keys read the prior: every NULL-key row gets the same value.
    nulls = {v for k, v in zip(t.column("text").to_pylist(), enc.scored.column("text_mean").to_pylist())
             if k is None}
    assert len(nulls) == 1
    prior_mean = posterity.Bundle.from_json(enc.bundle.to_json()).score(
        pa.table({"text": pa.array([None], pa.string()), "number": [None], "flag": [None]}))
    assert prior_mean.column("text_mean").to_pylist() == list(nulls)
    # An empty table is refused with the reason, not a crash.
    with pytest.raises(posterity.Error, match="training table has no rows with a value of target 'y'"):
        posterity.encode(rows.slice(0, 0), target="y", columns=["text"])


def test_engine_options_streams_read_once_and_empty_scoring_tables():
    """threads and memory_limit run the shell's engine settings and change no number; one
    reader given as train and score is read once (a second read would give no rows); a
    scoring table with no rows is said in the summary, as the shell says it."""
    rows = pa.Table.from_pandas(pd.read_csv(SAMPLE))
    options = dict(target="no_show", columns=["breed", "clinic"], score=rows)
    plain = posterity.encode(rows, **options)
    tuned = posterity.encode(rows, threads=1, memory_limit="512M", **options)
    assert tuned.train_encoded.equals(plain.train_encoded)
    assert tuned.scored.equals(plain.scored)
    # Too little memory for the work is the engine's refusal, named, never a crash.
    with pytest.raises(posterity.Error) as e:
        posterity.encode(rows, memory_limit=1024, **options)
    assert "more memory than the memory limit allows" in str(e.value)
    assert "Raise memory_limit, or give fewer threads" in str(e.value)
    reader = rows.to_reader()
    once = posterity.encode(reader, target="no_show", columns=["breed", "clinic"], score=reader)
    assert once.scored.num_rows == rows.num_rows
    assert once.scored.equals(plain.scored)
    assert not [w for s in plain.summary for w in s["warnings"] if "no rows" in w]
    empty = posterity.encode(rows, target="no_show", columns=["breed", "clinic"],
                             score=rows.slice(0, 0))
    said = [w for s in empty.summary for w in s["warnings"] if "scoring table has no rows" in w]
    assert len(said) == 1, empty.summary
    assert "scoring table has no rows" in str(empty)


# ------------------------------------------------------------------ bad input

def test_pandas_names_and_missing_targets_read_as_pandas_has_them():
    # A frame whose column names are numbers: the Arrow table names them by their text,
    # and encode takes the numbers as the user wrote them. A 0/1 target with NaN (how
    # pandas holds a missing value) stays a 0/1 target; its NaN rows are skipped.
    frame = pd.DataFrame({0: ["a", "b", "a", "b", "c"] * 20,
                          1: [1.0, 0.0, float("nan"), 1.0, 0.0] * 20})
    enc = posterity.encode(frame, target=1, columns=[0], prior=[1, 1])
    assert list(enc.train_encoded.columns) == [0, 1, "0_mean"]
    assert enc.summary[0]["family"] == "beta"
    assert enc.summary[0]["rows"] == 80.0


def test_bad_input_is_a_python_error(ctx):
    bundle = posterity.encode(SAMPLE, target="no_show", columns=["breed"]).bundle
    cases = [
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["no_such"]),
         ["key column 'no_such'", "training table"]),
        (lambda: posterity.encode(SAMPLE, target="no_such", columns=["breed"]), ["target 'no_such'"]),
        (lambda: posterity.encode(42, target="y", columns=["k"]), ["train", "int"]),
        (lambda: posterity.encode(pd.DataFrame([["a", "b", 1]], columns=["k", "k", "y"]),
                                  target="y", columns=["k"]),
         ["train", "cannot be read as a table", "Duplicate column names"]),
        (lambda: posterity.encode(pd.DataFrame({"k": ["a", "b"], "y": [1, "x"]}), target="y",
                                  columns=["k"]),
         ["train", "cannot be read as a table", "column y"]),
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["breed"], method="loo"),
         ["loo", "tree learners"]),
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["breed"], readers="mean"),
         ["readers"]),
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["breed"], folds=1),
         ["folds 1 is out of range", "allowed: 2 to 10"]),
        # More folds approach leave-one-out, which leaks (README, "Leakage").
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["breed"], folds=11),
         ["folds 11 is out of range", "leave-one-out"]),
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["breed"], folds=10**12),
         ["folds", "an integer from 2 to 10"]),
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["breed"], method="time"),
         ["method time needs time_column"]),
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["breed"], colour="red"),
         ["unknown option 'colour'"]),
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["breed"], time_column="day",
                                  half_life="soon"),
         ["half_life 'soon' is not a number of time units or 'fitted'"]),
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["breed"], time_column="day",
                                  horizon="soon"),
         ["horizon 'soon' is not a number of time units, 'matched' or 'none'"]),
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["breed"], time_column="day",
                                  horizon=-1), ["horizon -1 is out of range"]),
        (lambda: posterity.encode(pa.table({"k": ["a", "b"], "y": [0.5, float("nan")]}), target="y",
                                  columns=["k"]), ["target 'y' has 1 row(s)", "NaN", "finite numbers"]),
        (lambda: posterity.encode(SAMPLE, target=None, columns=["breed"]),
         ["encode: target must name a column as text", "None"]),
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["breed"], time_column="day",
                                  half_life=datetime.timedelta(days=3)),
         ["half_life was given as a duration", "time_column 'day' is not dates or timestamps"]),
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["breed"], time_column="day",
                                  horizon=pd.Timedelta(days=3)),
         ["horizon was given as a duration", "give horizon as a number of its own units"]),
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["breed"],
                                  time_column="booked_on", half_life=np.timedelta64("NaT")),
         ["NaT is no duration"]),
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["breed"],
                                  time_column="booked_on", half_life=[3]),
         ["half_life must be a number > 0", "a Timedelta or 'fitted'"]),
        # One column is not a table of rows: each is named, with the way to make one.
        (lambda: posterity.encode(pd.read_csv(SAMPLE)["breed"], target="no_show",
                                  columns=["breed"]), ["train", "pandas Series", ".to_frame()"]),
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["breed"],
                                  score=pl.read_csv(SAMPLE)["breed"]),
         ["score", "polars Series", ".to_frame()"]),
        (lambda: posterity.encode(pa.chunked_array([["a"]]), target="y", columns=["k"]),
         ["train", "pyarrow ChunkedArray", "pyarrow.table"]),
        (lambda: bundle.score(pd.read_csv(SAMPLE)["breed"]),
         ["Bundle.score", "pandas Series"]),
        # Bundle.score takes tables only: no message may offer it a path.
        (lambda: bundle.score(str(SAMPLE)),
         ["Bundle.score", "not a file path", "read the file first"]),
        (lambda: bundle.score(42), ["Bundle.score", "expected a pyarrow"]),
        # The scorer's own refusals name the method too.
        (lambda: bundle.score(pd.DataFrame({"clinic": ["x"]})),
         ["Bundle.score: key 'breed' needs column 'breed'"]),
        (lambda: posterity.Bundle.from_json(bundle.to_json().replace('"levels": {', '"levels": [], "x": {')),
         ["Bundle.from_json", "'levels' is missing or not an object"]),
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["breed"], threads=0),
         ["encode: threads must be a whole number from 1", "got 0"]),
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["breed"], threads=True),
         ["encode: threads must be a whole number from 1"]),
        (lambda: posterity.encode(SAMPLE, target="no_show", columns=["breed"],
                                  memory_limit="lots"),
         ["encode: memory_limit", "invalid size 'lots'", "2G"]),
        (lambda: posterity.Bundle.load("/no/such/bundle.json"), ["Bundle.load", "cannot read"]),
        (lambda: posterity.Bundle.from_json("{}"), ["Bundle.from_json", "posterity bundle"]),
    ]
    for call, fragments in cases:
        with pytest.raises(posterity.Error) as e:
            call()
        for f in fragments:
            assert f in str(e.value), f"{f!r} not in {e.value}"
        # Every refusal names the function first.
        assert str(e.value).split(":")[0] in ("encode", "Bundle.load", "Bundle.from_json",
                                              "Bundle.score"), \
            str(e.value)
    # SQL errors from the functions carry their messages through the engine.
    for sql, fragments in [
        ("SELECT beta_posterior(y, p) FROM (VALUES (1, beta_prior(1, 1))) t(y, p)",
         ["beta_posterior", "prior (argument 2) must be a constant"]),
        ("SELECT beta_posterior(2)", ["beta_posterior", "outcome = 2", "0 or 1"]),
        ("SELECT beta_posterior(y, beta_prior(0, 1)) FROM (VALUES (1)) t(y)",
         ["beta_posterior: the prior (argument 2) is invalid", "a = 0"]),
        ("SELECT beta_prior('x', 1)", ["beta_prior"]),
        ("SELECT posterior_quantile(beta_prior(1, 1), 1.5)", ["posterior_quantile", "q = 1.5"]),
        ("SELECT nig_posterior(x) FROM (VALUES ('NaN'::double)) t(x)", ["nig_posterior", "value = NaN"]),
        # The shell refuses this frame when it plans the query; through the interface the
        # frame is read from the window expression's name and refused too, never ignored.
        ("""SELECT posterior_pool_before(p, day) OVER (PARTITION BY breed ORDER BY day
                RANGE BETWEEN 30 PRECEDING AND 1 PRECEDING)
            FROM (SELECT breed, day, beta_posterior(no_show) AS p FROM a GROUP BY breed, day)""",
         ["posterior_pool_before", "has a window frame", "leave it out"]),
    ]:
        with pytest.raises(Exception) as e:
            ctx.sql(sql).collect()
        for f in fragments:
            assert f in str(e.value), f"{sql}: {f!r} not in {e.value}"


def test_clauses_the_engine_would_drop_are_refused(ctx):
    """FILTER or OVER written on a reader instead of on the fit: the engine drops the
    clause without a word (every row read; one row for the table). ctx.sql refuses it by
    name; on the fit the clause works."""
    wrong = ("SELECT posterior_mean(beta_posterior(no_show, beta_prior(2, 18))) "
             "FILTER (WHERE day < 0) AS m FROM a GROUP BY breed")
    with pytest.raises(posterity.Error, match="posterior_mean: FILTER would be ignored"):
        ctx.sql(wrong)
    with pytest.raises(posterity.Error, match="posterior_mean: OVER would be ignored"):
        ctx.sql_with_options("SELECT posterior_mean(beta_posterior(no_show, beta_prior(2, 18))) "
                             "OVER (PARTITION BY breed) FROM a", datafusion.SQLOptions())
    right = ctx.sql("SELECT posterior_mean(beta_posterior(no_show, beta_prior(2, 18)) "
                    "FILTER (WHERE day < 0)) AS m FROM a GROUP BY breed").to_pandas()
    assert len(right) > 10 and (right["m"] == 0.1).all()
    # FROM alone would be a query of no columns.
    with pytest.raises(posterity.Error, match="starts with FROM needs a SELECT"):
        ctx.sql("FROM a")
    assert len(ctx.sql("FROM a SELECT breed").to_pandas()) > 10
    # DISTINCT on a fit: refused in SQL, and on a DataFrame call beside another
    # aggregate (where the fit would have ignored it).
    with pytest.raises(posterity.Error, match="beta_posterior: DISTINCT is not supported"):
        ctx.sql("SELECT beta_posterior(DISTINCT no_show) FROM a")
    fit = ctx.udaf("beta_posterior")
    both = [fit(col("no_show")).distinct().build(), datafusion.functions.count(col("day"))]
    with pytest.raises(Exception, match="beta_posterior: DISTINCT is not supported"):
        ctx.table("a").aggregate([], both).collect()
    # Registering twice checks once; a context's other methods are untouched.
    posterity.register(ctx)
    assert ctx.sql("SELECT 1 AS one").to_pandas()["one"].tolist() == [1]


def test_the_interpreter_survives_every_function_with_wrong_arguments(ctx):
    # Every function, called with no argument, text, NULL, a number and a list: an
    # error or a value, never a crash (the test getting to its end is the check).
    failures = 0
    for name in posterity.functions():
        for args in ["", "'text'", "NULL", "1.5", "[1, 2]", "'text', 'text', 'text'"]:
            try:
                ctx.sql(f"SELECT {name}({args})").collect()
            except Exception as e:  # noqa: BLE001 - any refusal is fine, a crash is not
                assert "panicked" not in str(e), f"{name}({args}): {e}"
                failures += 1
    assert failures > 0


def test_other_engine_versions_are_refused(monkeypatch):
    monkeypatch.setattr(datafusion, "__version__", "54.1.0")
    with pytest.raises(posterity.Error, match="built on DataFusion 55.*54.1.0"):
        posterity.register(datafusion.SessionContext())


def test_empty_frames_read_the_calls_own_prior(ctx):
    # Through the engine's function interface posterity's planning rule cannot run, and
    # the engine cannot ask a fit for its value on no rows; register(ctx) writes each
    # windowed fit as COALESCE(fit, its prior), so a level's first rows read the call's
    # own prior, as in the shell: every row equals the shell's, for a given prior, the
    # default prior, each family, a frame of later rows and a window named apart.
    windows = [
        ("beta_posterior(no_show, beta_prior(2, 18))", "OVER (PARTITION BY breed ORDER BY day "
         "RANGE BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING)"),
        ("beta_posterior(no_show)", "OVER (PARTITION BY breed ORDER BY day "
         "RANGE BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING)"),
        ("nig_posterior(amount, nig_prior(80, 1, 2, 2000))", "OVER (PARTITION BY vet ORDER BY day "
         "RANGE BETWEEN 30 PRECEDING AND 1 PRECEDING)"),
        ("gamma_posterior(no_show, 1)", "OVER w"),
        ("dirichlet_posterior(outcome, dirichlet_prior(['attended', 'no_show', 'late_cancellation', "
         "'rescheduled'], 1))", "OVER (PARTITION BY clinic ORDER BY appointment_id "
         "ROWS BETWEEN 3 FOLLOWING AND 5 FOLLOWING)"),
    ]
    for fit, over in windows:
        read = "posterior_mean(p, 'no_show')" if fit.startswith("dirichlet") else "posterior_mean(p)"
        sql = (f"SELECT appointment_id, {read} AS m FROM (SELECT appointment_id, {fit} {over} AS p "
               "FROM a WINDOW w AS (PARTITION BY breed ORDER BY day RANGE BETWEEN 7 PRECEDING "
               "AND 1 PRECEDING)) ORDER BY appointment_id")
        rows, shell = python_rows(ctx, sql), shell_rows(sql)
        assert len(rows) == len(shell) == 3000, fit
        for r, s in zip(rows, shell):
            assert r["m"] is not None and not math.isnan(r["m"]), (fit, r)
            assert abs(r["m"] - s["m"]) <= 1e-12 * abs(s["m"]), (fit, r, s)
        # The engine's own method, unprepared: its empty frames are NULL (so the test
        # reads some; when this fails the engine gives the prior itself).
        raw = datafusion.SessionContext.sql(ctx, sql).to_pandas()["m"]
        assert raw.isna().sum() > 1, fit
    # A correlated scalar subquery of one fit: a breed with no rows there reads the prior.
    sql = ("SELECT o.appointment_id, posterior_mean((SELECT beta_posterior(i.no_show, "
           "beta_prior(2, 18)) FROM a i WHERE i.breed = o.breed AND i.day < 30)) AS m "
           "FROM a o ORDER BY o.appointment_id")
    rows, shell = python_rows(ctx, sql), shell_rows(sql)
    assert [r["m"] for r in rows] == [s["m"] for s in shell]
    assert sum(r["m"] == 0.1 for r in rows) > 10
    assert python_rows(ctx, "SELECT posterior_mean(beta_posterior(no_show, beta_prior(2, 18)) "
                            "OVER (PARTITION BY breed ORDER BY day RANGE BETWEEN UNBOUNDED "
                            "PRECEDING AND 1 PRECEDING)) AS m FROM a WHERE day = 0 "
                            "AND breed = 'breed_017'") == [{"m": 0.1}]
    none = python_rows(ctx, "SELECT posterior_mean(beta_posterior(no_show, beta_prior(2, 18))) AS m "
                            "FROM a WHERE false")
    assert none == [{"m": 0.1}]


def test_a_polars_column_of_only_nulls_is_read():
    # polars gives such a column the Null type, which its own Arrow stream writes in a
    # form the C interface refuses; posterity reads it through pyarrow instead.
    rows = pl.DataFrame({"k": [None, None, None, None], "clinic": ["a", "b", "a", "b"],
                         "y": [1, 0, 1, 1]})
    assert rows.schema["k"] == pl.Null
    enc = posterity.encode(rows, target="y", columns=["clinic"])
    assert enc.train_encoded["clinic_mean"].is_finite().all()
    scored = posterity.Bundle.from_json(enc.bundle.to_json()).score(rows)
    assert scored["clinic_mean"].is_finite().all()
    with pytest.raises(posterity.Error, match="columns k: no training row has both"):
        posterity.encode(rows.lazy(), target="y", columns=["k"])


@pytest.mark.skipif(not os.path.exists("/proc/self/status"), reason="Linux only")
def test_importing_turns_transparent_huge_pages_off():
    """With huge pages the extension's allocator spent most of an as-of encode in the
    kernel zeroing pages (BENCHMARKS.md, "Transparent huge pages off"); the import turns
    them off for the process (prctl PR_GET_THP_DISABLE is 42)."""
    import ctypes
    assert ctypes.CDLL(None).prctl(42, 0, 0, 0, 0) == 1
