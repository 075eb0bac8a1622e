"""Recency weights on the tasks (all split in time): encode's defaults with and without
`--half-life H --time-column t` (t: day of the year for flights, the season's year for
baseball and Bundesliga); H fixed or `fitted`; seeds 0 and 1, evaluate.py's protocol.

    POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \\
        benches/modeling/half_life_probe.py [task prefix ...] [--only defaults,fitted,...]
"""
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import (  # noqa: E402
    posterity_mean_score, split, task_named, time_of)

# (task prefix, half-lives in the units of the task's time: days or seasons)
PROBES = [
    ("bundesliga", ["3", "10", "fitted"]),
    ("flights_delay", ["30", "90", "fitted"]),
    ("flights_late", ["fitted"]),
    ("baseball", ["fitted"]),
]


def main():
    args = [a for a in sys.argv[1:] if not a.startswith("--")]
    only = sys.argv[sys.argv.index("--only") + 1].split(",") if "--only" in sys.argv else None
    if only:
        args = [a for a in args if a != ",".join(only)]
    with tempfile.TemporaryDirectory() as d:
        for prefix, half_lives in PROBES:
            if args and prefix not in args:
                continue
            name, loader, kind = task_named(prefix)
            keys, numeric, tr, te, ytr, yte = split(loader)
            t = time_of(name, tr)
            variants = {"defaults": [], "as-of": ["--time-column", "t"]}
            for h in half_lives:
                variants[h] = ["--half-life", h, "--time-column", "t"]
                variants[f"as-of {h}"] = ["--half-life", h, "--time-column", "t",
                                          "--method", "time"]
            for variant, extra in variants.items():
                if only and variant not in only:
                    continue
                score = posterity_mean_score(kind, keys, numeric, tr, te, ytr, yte, Path(d), extra, t)
                print(f"{prefix:<16} {variant:<14} {score:.4f}", flush=True)


if __name__ == "__main__":
    main()
