"""Which of encode's choices moves the held-out score? One option changed at a time.

    POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \\
        benches/modeling/ablation.py [TASK_PREFIX ...]

Same data, split, learner and metric as evaluate.py (its protocol), two seeds;
variants of `posterity encode` only. Prints one line per task and variant.
"""

import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import TASKS, held_out_score, posterity_encodings, split  # noqa: E402

SEEDS = [0, 1]


def variants(keys):
    every_key_posterior = ["--treatment", ",".join(f"{k}=posterior" for k in keys)]
    return {
        "defaults": [],
        "score-evidence full": ["--score-evidence", "full"],
        "every key posterior": every_key_posterior,
        "readers mean,sd": ["--readers", "mean,sd"],
        "indicators 0": ["--indicators", "0"],
        "indicators 0 + evidence full": ["--indicators", "0", "--score-evidence", "full"],
    }


def main():
    # Arguments: task name prefixes; `--only NAME,NAME` keeps some variants.
    args = sys.argv[1:]
    only = None
    if "--only" in args:
        i = args.index("--only")
        only, args = args[i + 1].split(","), args[:i] + args[i + 2:]
    wanted = args
    with tempfile.TemporaryDirectory() as d:
        for task, (loader, kind) in TASKS.items():
            if wanted and not any(task.startswith(w) for w in wanted):
                continue
            keys, numeric, tr, te, ytr, yte = split(loader)
            for name, extra in variants(keys).items():
                if only and name not in only:
                    continue
                scores = []
                readers = None  # encode's defaults
                if "--readers" in extra:
                    i = extra.index("--readers")
                    readers, extra = extra[i + 1], extra[:i] + extra[i + 2:]
                for seed in SEEDS:
                    ftr, fte = posterity_encodings(tr, te, ytr, keys, seed, readers, Path(d), extra)
                    scores.append(held_out_score(kind, numeric, tr, te, ftr, fte, ytr, yte, seed))
                print(f"{task.split(' ')[0]:<22} {name:<28} {np.mean(scores):.4f}", flush=True)


if __name__ == "__main__":
    main()
