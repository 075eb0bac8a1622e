"""posterity: conjugate Bayesian encodings of categorical columns, in DataFusion.

    import datafusion, posterity
    ctx = datafusion.SessionContext()
    fns = posterity.register(ctx)          # every function, in SQL and as expressions
    ctx.sql("SELECT breed, beta_posterior(no_show) AS p FROM a GROUP BY breed")

    enc = posterity.encode(train_df, target="no_show", columns=["breed", "clinic"],
                           score=next_month_df)
    enc.train_encoded, enc.scored, enc.encodings["breed"], enc.bundle, enc.summary
    posterity.Bundle.load("encoded/").score(rows_df)

Results come back in the kind of table that went in: pandas for pandas, polars for
polars, pyarrow otherwise. Every refusal is a ``posterity.Error`` (a ``ValueError``)
whose message names the function, the argument and what is allowed.
"""

from __future__ import annotations

import atexit
import datetime
import json
import os
from types import SimpleNamespace
from typing import Any

import pyarrow as pa
import pyarrow.dataset  # noqa: F401 (pa.dataset.Dataset inputs)

from . import _posterity
from ._posterity import Error

# Input files read from decompressed or converted copies: removed when Python exits.
atexit.register(_posterity.remove_temporaries)

__all__ = ["Bundle", "Encoded", "Error", "doc", "encode", "engine_version", "functions",
           "register"]


def engine_version() -> str:
    """The DataFusion version posterity is built on."""
    return _posterity.engine_version()


def _documentation() -> dict[str, dict]:
    return {d["name"]: d for d in json.loads(_posterity.documentation())}


def doc(name: str) -> str:
    """The documentation of one function: description, syntax, arguments, example."""
    docs = _documentation()
    if name not in docs:
        raise Error(f"doc: no posterity function named '{name}' (see posterity.functions())")
    d = docs[name]
    arguments = "\n".join(f"  {a}: {text}" for a, text in d["arguments"])
    return (f"{d['syntax']}\n\n{d['description']}\n\nArguments:\n{arguments}\n\n"
            f"Example:\n  {d['example']}")


def functions() -> list[str]:
    """The names of every posterity function."""
    return sorted(_documentation())


def _check_engine() -> None:
    import datafusion

    installed = getattr(datafusion, "__version__", "unknown")
    built_on = engine_version()
    if installed.split(".")[0] != built_on.split(".")[0]:
        raise Error(
            f"posterity is built on DataFusion {built_on}; the installed datafusion package "
            f"is {installed}, built on another engine version, whose function interface "
            f"differs. Install datafusion {built_on.split('.')[0]}.x "
            f"(pip install 'datafusion>={built_on.split('.')[0]},<"
            f"{int(built_on.split('.')[0]) + 1}')")


def register(ctx) -> SimpleNamespace:
    """Register every posterity function on a ``datafusion.SessionContext``.

    Returns the functions by name, for the DataFrame API and windows:
    ``fns.beta_posterior(col("no_show"))``,
    ``fns.posterior_mean(col("p"))``,
    ``fns.beta_posterior(col("y")).over(Window(partition_by=[col("breed")]))``.
    Each carries its documentation (``help(fns.beta_posterior)``).

    One difference from posterity inside Rust: the planning rule that gives empty
    window frames and empty groups the call's own prior cannot travel through the
    engine's function interface. Give as-of windows a frame that holds rows, or
    COALESCE the result with the prior (README, "posterity from Python").
    """
    from datafusion import AggregateUDF, ScalarUDF, WindowUDF

    _check_engine()
    docs = _documentation()
    out = {}
    for f in _posterity.scalar_functions():
        udf = ScalarUDF.from_pycapsule(f)
        ctx.register_udf(udf)
        out[f.name] = udf
    for f in _posterity.aggregate_functions():
        udaf = AggregateUDF.from_pycapsule(f)
        ctx.register_udaf(udaf)
        out[f.name] = udaf
    for f in _posterity.window_functions():
        udwf = WindowUDF.from_pycapsule(f)
        ctx.register_udwf(udwf)
        out[f.name] = udwf
    _prepare_sql(ctx)
    for name, udf in out.items():
        if name in docs:
            try:
                udf.__doc__ = doc(name)
            except (AttributeError, TypeError):
                pass
    return SimpleNamespace(**out)


def _prepare_sql(ctx) -> None:
    """Prepare the SQL of ``ctx.sql`` and ``ctx.sql_with_options`` first. The engine drops
    OVER, FILTER, DISTINCT and ORDER BY written on a scalar function without a word, so
    ``posterior_mean(beta_posterior(y)) FILTER (WHERE c)`` would read every row; such a
    statement is refused with the clause named (a ``posterity.Error``). And the engine
    cannot ask a fit for its prior when a window frame is empty, so each windowed fit is
    written as ``COALESCE(fit, its prior)``."""
    if getattr(ctx, "_posterity_checks_sql", False):
        return
    try:
        for method in ("sql", "sql_with_options"):
            unchecked = getattr(ctx, method)

            def checked(query, *args, _unchecked=unchecked, **kwargs):
                if isinstance(query, str):
                    query = _posterity.prepare_sql(query)
                return _unchecked(query, *args, **kwargs)

            checked.__doc__ = unchecked.__doc__
            setattr(ctx, method, checked)
        ctx._posterity_checks_sql = True
    except (AttributeError, TypeError):
        pass  # a context that takes no attributes keeps the engine's own methods


# ------------------------------------------------------------------ tables

def _kind(data: Any) -> str:
    module = type(data).__module__.split(".")[0]
    if module == "pandas":
        return "pandas"
    if module == "polars":
        return "polars"
    return "arrow"


def _as_input(data: Any, what: str, paths: bool = True):
    """A path (str or PathLike) as text (where ``paths``), or an object with
    ``__arrow_c_stream__``."""
    if isinstance(data, (str, os.PathLike)):
        if not paths:
            raise Error(f"{what}: give the rows as a table (pandas, polars or pyarrow), not a "
                        "file path; read the file first (for example pandas.read_parquet)")
        return os.fspath(data)
    if _kind(data) in ("pandas", "polars") and type(data).__name__ == "Series":
        raise Error(f"{what}: expected a table of rows; got a {_kind(data)} Series (one "
                    "column): make it a table with .to_frame()")
    if isinstance(data, (pa.Array, pa.ChunkedArray)):
        raise Error(f"{what}: expected a table of rows; got a pyarrow {type(data).__name__} "
                    "(one column): make it a table with pyarrow.table({'name': array})")
    if _kind(data) == "pandas":
        # An unnamed index is not data; a named one (``set_index("breed")``) is a column,
        # as in pandas' own Arrow form.
        named = [n for n in data.index.names if n is not None and n not in data.columns]
        if named:
            data = data.reset_index(level=named)
        try:
            return pa.Table.from_pandas(data, preserve_index=False)
        except (pa.ArrowException, ValueError, TypeError) as e:
            # Duplicate column names, or an object column mixing text and numbers.
            raise Error(f"{what}: the pandas DataFrame cannot be read as a table: {e}") from e
    if _kind(data) == "polars":
        if hasattr(data, "collect"):
            data = data.collect()  # a LazyFrame: its query runs here
        # Through pyarrow (no copy): polars' own stream writes a column of only
        # nulls (dtype Null) with a buffer the Arrow C interface does not allow.
        return data.to_arrow()
    if hasattr(data, "__arrow_c_stream__"):
        return data
    if isinstance(data, pa.dataset.Dataset):
        return data.scanner().to_reader()  # streamed, batch by batch
    raise Error(f"{what}: expected {'a file path, ' if paths else ''}a pyarrow Table or "
                f"Dataset, a pandas or a polars DataFrame or LazyFrame; got "
                f"{type(data).__name__}")


def _read_once(train: Any, score: Any):
    """``train`` and ``score``, with one stream given as both read into a table first: a
    ``RecordBatchReader`` can be read once, so the scored rows would be none."""
    if score is train and isinstance(train, pa.RecordBatchReader):
        train = score = train.read_all()
    return train, score


def _column_name(name: Any, what: str, kind: str) -> str:
    """A column name as the table has it: pandas names that are not text (``0``,
    ``1.5``) become their text when the frame becomes an Arrow table."""
    if isinstance(name, str):
        return name
    if kind == "pandas" and name is not None:
        return str(name)
    raise Error(f"encode: {what} must name a column as text; got {name!r} "
                f"({type(name).__name__})")


def _days(value: Any):
    """A duration (``datetime.timedelta``, ``pandas.Timedelta``, ``numpy.timedelta64``)
    in days; ``None`` for anything else."""
    if isinstance(value, datetime.timedelta):
        return value / datetime.timedelta(days=1)
    if type(value).__name__ == "timedelta64" and type(value).__module__ == "numpy":
        import numpy as np

        if np.isnat(value):
            raise Error("encode: a half_life or horizon of NaT is no duration")
        return float(value / np.timedelta64(1, "D"))
    return None


def _as_output(data, kind: str, rows=None):
    """``data`` in the kind that went in. Given ``rows`` (the pandas frame these are
    the rows of, in the same order), the result is ``rows`` as they went in, with
    their index and column types, and the feature columns appended: assigning a
    feature column to the frame aligns it by index, so a fresh 0..n index would put
    each value on another row of a shuffled or filtered frame."""
    if data is None:
        return None
    table = pa.table(data)
    if kind == "pandas" and _kind(rows) == "pandas":
        import pandas as pd

        # The input's columns as its Arrow form names them (by their text), and its
        # named index levels, which were read as columns.
        given = {str(c) for c in rows.columns}
        given.update(str(n) for n in rows.index.names if n is not None)
        features = table.select([n for n in table.column_names if n not in given]).to_pandas()
        if len(features) != len(rows):
            raise Error(f"posterity: {len(features)} rows came back for the {len(rows)} given; "
                        "please report this")
        features.index = rows.index
        return pd.concat([rows, features], axis=1)
    if kind == "pandas":
        return table.to_pandas()
    if kind == "polars":
        import polars as pl

        return pl.from_arrow(table)
    return table


class Bundle:
    """A serving bundle: each key's prior and per-level posteriors.

    ``Bundle.load("encoded/")`` reads ``bundle.json``; ``score(rows)`` appends every
    key's feature columns (the columns ``encode`` gives scored rows, same values)
    without an engine session.
    """

    def __init__(self, inner):
        self._inner = inner

    @staticmethod
    def load(path) -> "Bundle":
        return Bundle(_posterity.Bundle.load(os.fspath(path)))

    @staticmethod
    def from_json(text: str) -> "Bundle":
        return Bundle(_posterity.Bundle.from_json(text))

    def to_json(self) -> str:
        return self._inner.to_json()

    @property
    def target(self) -> str:
        return self._inner.target

    @property
    def family(self) -> str:
        return self._inner.family

    @property
    def readers(self) -> list[str]:
        return self._inner.readers

    @property
    def keys(self) -> list[str]:
        return self._inner.keys

    def score(self, rows):
        """``rows`` (pandas, polars or pyarrow; pandas with its own index and column types)
        with the feature columns appended."""
        kind = _kind(rows)
        data = _as_input(rows, "Bundle.score", paths=False)
        return _as_output(self._inner.score_data(data), kind, rows)

    def __repr__(self) -> str:
        return f"Bundle(target={self.target!r}, family={self.family!r}, keys={self.keys!r})"


class Encoded:
    """What ``encode`` returns: tables in the kind that went in (pandas rows with their own
    index and column types, the feature columns appended), and the bundle."""

    def __init__(self, inner, kind: str, train=None, score=None):
        self._inner = inner
        self.train_encoded = _as_output(inner.train_encoded, kind, train)
        # Scored rows come back in the kind they went in (a path: the training rows' kind).
        score_kind = kind if score is None or isinstance(score, (str, os.PathLike)) else _kind(score)
        self.scored = _as_output(inner.scored, score_kind, score)
        self.encodings = {k: _as_output(v, kind) for k, v in inner.encodings}
        self.bundle = Bundle(inner.bundle)
        self.summary = json.loads(inner.summary_json)
        # With report=True: the self-contained HTML report (write() also saves it).
        self.report = inner.report

    def write(self, out, replace: bool = False) -> None:
        """Write the directory the shell's ``encode --out`` writes, whole or not at all."""
        self._inner.write(os.fspath(out), replace)

    def __str__(self) -> str:
        return self._inner.summary_text

    def __repr__(self) -> str:
        return f"Encoded(keys={list(self.encodings)})\n{self._inner.summary_text}"


def encode(train, target: str, columns: list[str], score=None, out=None, replace: bool = False,
           **options) -> Encoded:
    """Training encodings, encoding tables, a serving bundle and (with ``score``) scored rows.

    ``train`` and ``score``: a file path (Parquet, CSV, TSV, NDJSON; ``name.csv.gz`` and the
    like are read from a decompressed copy), a pyarrow Table or
    Dataset, a pandas DataFrame (a named index is read as a column) or a polars DataFrame or
    LazyFrame. The options are the shell's ``encode`` flags with
    underscores: ``interactions=[["breed", "clinic"]]``, ``family``, ``prior`` ("fitted",
    "jeffreys", "uniform" or numbers), ``method`` ("kfold" or "time"; "time" by default when ``time_column`` is given), ``folds``, ``seed``,
    ``time_column`` (numbers, or dates, datetimes or ISO date text, whose half-lives and
    horizons count days), ``half_life`` (time units, a Timedelta for a time column of dates or datetimes, or
    "fitted": chosen per key), ``horizon`` (time units, a Timedelta, "matched": from
    ``score``'s times, or "none"), ``normalize_keys``, ``time_ties``, ``exposure``,
    ``readers=["mean", "sd"]`` (default ``["mean"]``, plus ``"sd"`` for a continuous key whose
    levels differ widely in spread; the summary's ``readers_reason`` says which), ``draws``, ``indicators``, ``indicator_min_rows``,
    ``treatment={"clinic": "levels"}``, ``hierarchy="postcode>district>region"`` (or a list of
    such chains, finest first; k-fold and as-of encodings), ``score_evidence`` ("matched" or "full"),
    ``report=True`` (the HTML report: ``Encoded.report``, ``report.html``). CSV files given by
    path are read with ``csv_null`` ("NA"), ``csv_delimiter``, ``csv_no_header``,
    ``csv_infer_rows`` (a number or "all") and ``csv_text`` (columns read as text). The engine
    runs with ``threads`` (default: every core) and ``memory_limit`` (bytes or "4G"; default
    none), as the shell's ``--threads`` and ``--memory-limit``. The same inputs give the shell's
    numbers. With ``out``, the outputs are also written there.
    """
    kind = _kind(train)
    target = _column_name(target, "target", kind)
    if isinstance(columns, str) or not hasattr(columns, "__iter__"):
        columns = [columns]
    columns = [_column_name(c, "columns", kind) for c in columns]
    for option in ("time_column", "exposure"):
        if options.get(option) is not None:
            options[option] = _column_name(options[option], option, kind)
    for option in ("half_life", "horizon"):
        days = _days(options.get(option))
        if days is not None:
            options[option] = days
            options["_durations_in_days"] = True
    train, score = _read_once(train, score)
    inner = _posterity.encode_data(_as_input(train, "encode: train"), target, list(columns),
                                   None if score is None else _as_input(score, "encode: score"),
                                   **options)
    result = Encoded(inner, kind, train, score)
    if out is not None:
        result.write(out, replace)
    return result


def update(previous, train, score=None, out=None, replace: bool = False, exposure=None,
           decay=None, **options) -> Encoded:
    """Refresh a previous ``encode`` with new rows, without refitting (the shell's
    ``encode --update``): each level's stored posterior is pooled with the new rows under
    the stored priors, so the result equals a fit on old and new rows together under the
    same priors. ``train`` holds the new rows only.

    ``previous``: an ``Encoded``, a ``Bundle``, or the path of an output directory (or its
    ``bundle.json``). It fixes the target, keys, family, priors and readers. ``decay``
    (in (0, 1]) multiplies the stored evidence first: 0.5 after one half-life of age.
    ``score``, ``out``, ``replace``, ``exposure``, ``threads``, ``memory_limit`` and the
    ``csv_*`` options are as for ``encode``. A refresh gives the encodings, the bundle and (with ``score``) scored rows;
    ``train_encoded`` is None (leak-free training features come from ``encode``).
    """
    if isinstance(previous, Encoded):
        bundle = previous.bundle
    elif isinstance(previous, Bundle):
        bundle = previous
    elif isinstance(previous, (str, os.PathLike)):
        bundle = Bundle.load(previous)
    else:
        raise Error(f"update: previous must be an Encoded result, a Bundle or the path of an "
                    f"output directory; got {type(previous).__name__}")
    kind = _kind(train)
    if exposure is not None:
        exposure = _column_name(exposure, "exposure", kind)
    train, score = _read_once(train, score)
    inner = _posterity.update_data(bundle._inner, _as_input(train, "update: train"),
                                   None if score is None else _as_input(score, "update: score"),
                                   exposure=exposure, decay=decay, **options)
    result = Encoded(inner, kind, train, score)
    if out is not None:
        result.write(out, replace)
    return result
