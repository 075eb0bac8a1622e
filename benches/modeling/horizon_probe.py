"""How far back as-of training rows read (`--horizon`): encode's defaults given the time
against horizons matched to the scored rows and fixed ones; seeds 0 and 1, evaluate.py's
protocol (the scored file has the time too).

    POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \\
        benches/modeling/horizon_probe.py [flights_late flights_delay baseball bundesliga]
"""
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import (  # noqa: E402
    posterity_mean_score, split, task_named, time_of)

AS_OF = ["--time-column", "t"]
FIXED = {"flights_late": ["15", "30"], "flights_delay": ["3", "7", "15", "30", "61"],
         "baseball": ["3", "7"], "bundesliga": ["3", "5", "9"]}


def variants(prefix):
    out = {"as-of (defaults given the time)": AS_OF,
           "horizon matched": AS_OF + ["--horizon", "matched"]}
    for h in FIXED[prefix]:
        out[f"horizon {h}"] = AS_OF + ["--horizon", h]
    if prefix.startswith("flights"):
        out["horizon matched, half-life fitted"] = AS_OF + [
            "--horizon", "matched", "--method", "time", "--half-life", "fitted"]
    return out


def main():
    for prefix in sys.argv[1:] or list(FIXED):
        name, loader, kind = task_named(prefix)
        keys, numeric, tr, te, ytr, yte = split(loader)
        t, t_scored = time_of(name, tr), time_of(name, te)
        with tempfile.TemporaryDirectory() as d:
            for variant, extra in variants(prefix).items():
                score = posterity_mean_score(kind, keys, numeric, tr, te, ytr, yte, Path(d), extra,
                                             t, score_time=t_scored)
                print(f"{prefix:<14} {variant:<36} {score:.4f}", flush=True)


if __name__ == "__main__":
    main()
