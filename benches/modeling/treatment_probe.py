"""Keys of few large levels (Bundesliga's 49 teams; flights' 16 carriers and 3 airports):
as-of encodings with the treatments encode offers for them; seeds 0 and 1, evaluate.py's
protocol.

    POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \\
        benches/modeling/treatment_probe.py [bundesliga flights_late flights_delay]
"""
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import (  # noqa: E402
    posterity_mean_score, split, task_named, time_of)

AS_OF = ["--time-column", "t"]
VARIANTS = {
    "bundesliga": {
        "as-of (defaults given the time)": AS_OF,
        "as-of, no indicators": AS_OF + ["--indicators", "0"],
        "as-of, an indicator for every team": AS_OF + ["--indicators", "49",
                                                       "--indicator-min-rows", "0"],
        "teams as levels only": AS_OF + ["--treatment", "HomeTeam=levels",
                                         "--treatment", "AwayTeam=levels"],
    },
    "flights_late": {
        "as-of (defaults given the time)": AS_OF,
        "carrier, origin as levels only": AS_OF + ["--treatment", "carrier=levels",
                                                   "--treatment", "origin=levels"],
    },
}
VARIANTS["flights_delay"] = VARIANTS["flights_late"]


def main():
    tasks = sys.argv[1:] or list(VARIANTS)
    for prefix in tasks:
        name, loader, kind = task_named(prefix)
        keys, numeric, tr, te, ytr, yte = split(loader)
        t = time_of(name, tr)
        with tempfile.TemporaryDirectory() as d:
            for variant, extra in VARIANTS[prefix].items():
                score = posterity_mean_score(kind, keys, numeric, tr, te, ytr, yte, Path(d), extra, t)
                print(f"{prefix:<14} {variant:<36} {score:.4f}", flush=True)


if __name__ == "__main__":
    main()
