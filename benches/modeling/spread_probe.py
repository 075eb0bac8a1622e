"""Horizons spread like the scored rows' gaps: each training row reads its level's data as old
as a scored row drawn at random would (one of four horizons at the quartile midpoints of the
scored rows' gaps past the newest training time), optionally with the gap as a feature (the
training row's horizon; the scored row's own gap). Against the defaults given the time and
`--horizon matched` (one horizon, the median gap). Seeds 0 and 1, evaluate.py's protocol.

    POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \\
        benches/modeling/spread_probe.py [flights_late flights_delay baseball bundesliga]
"""
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import (  # noqa: E402
    held_out_score, posterity_encodings, split, task_named, time_of)

AS_OF = ["--time-column", "t"]


def spread(kind, keys, numeric, tr, te, ytr, yte, work, t, t_scored, seed, with_gap):
    gaps = t_scored.values - t.values.max()
    horizons = np.unique(np.maximum(np.quantile(gaps, [0.125, 0.375, 0.625, 0.875], method="inverted_cdf"), 1.0))
    bucket = np.random.default_rng(1000 + seed).integers(0, len(horizons), len(tr))
    ftr, fte = None, None
    for b, h in enumerate(horizons):
        f_tr, f_te = posterity_encodings(tr, te, ytr, keys, seed, None, work,
                                         AS_OF + ["--horizon", repr(float(h))], t, t_scored)
        if ftr is None:
            ftr, fte = f_tr.copy(), f_te
        else:
            assert np.allclose(fte.to_numpy(float), f_te.to_numpy(float), equal_nan=True)
        ftr[bucket == b] = f_tr[bucket == b].values
    if with_gap:
        ftr["gap"] = horizons[bucket]
        fte["gap"] = gaps
    return held_out_score(kind, numeric, tr, te, ftr, fte, ytr, yte, seed)


def main():
    for prefix in sys.argv[1:] or ["flights_late", "flights_delay", "baseball", "bundesliga"]:
        name, loader, kind = task_named(prefix)
        keys, numeric, tr, te, ytr, yte = split(loader)
        t, t_scored = time_of(name, tr), time_of(name, te)
        with tempfile.TemporaryDirectory() as d:
            for with_gap in (False, True):
                scores = [spread(kind, keys, numeric, tr, te, ytr, yte, Path(d), t, t_scored, s,
                                 with_gap) for s in (0, 1)]
                label = "spread horizons" + (", gap feature" if with_gap else "")
                print(f"{prefix:<14} {label:<36} {np.mean(scores):.4f}", flush=True)


if __name__ == "__main__":
    main()
