"""The learner-free stand-in for method_trial.py: the same inner split of each task's training
rows (the latest fifth scored), encode's defaults with and without the time column, seed 0; but
instead of the learner, a least-squares line (an intercept and every encoding column) fitted on
the earlier rows' own training encodings and scored by squared error on the later rows'
encodings — the way the half-life trial reads a candidate. Prints the inner losses and the choice,
to set beside method_trial.py's.

    OMP_NUM_THREADS=1 POSTERITY_BIN=target/release/posterity \\
        target/modeling-venv/bin/python benches/modeling/line_method_trial.py [task prefixes]
"""
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import TASKS, posterity_encodings, split, task_named, time_of  # noqa: E402

VARIANTS = {"k-fold": [], "as-of": ["--time-column", "t"]}


def line_loss(ftr, fte, ytr, yte):
    xtr = np.column_stack([np.ones(len(ftr)), ftr.to_numpy(dtype=float)])
    xte = np.column_stack([np.ones(len(fte)), fte.to_numpy(dtype=float)])
    beta, *_ = np.linalg.lstsq(xtr, ytr, rcond=None)
    return float(np.mean((yte - xte @ beta) ** 2))


def main():
    for prefix in sys.argv[1:] or [name.split(" ")[0] for name in TASKS]:
        name, loader, kind = task_named(prefix)
        keys, numeric, tr, _, ytr, _ = split(loader)
        t = time_of(name, tr)
        early = (t < np.quantile(t.values, 0.8)).values
        losses = {}
        with tempfile.TemporaryDirectory() as d:
            for variant, extra in VARIANTS.items():
                ftr, fte = posterity_encodings(
                    tr[early], tr[~early], ytr[early], keys, 0, None, Path(d), extra,
                    t[early] if extra else None)
                losses[variant] = line_loss(ftr, fte, ytr[early].values.astype(float),
                                            ytr[~early].values.astype(float))
        choice = min(losses, key=losses.get)
        print(f"| {prefix} | {losses['k-fold']:.6g} | {losses['as-of']:.6g} | {choice} |",
              flush=True)


if __name__ == "__main__":
    main()
