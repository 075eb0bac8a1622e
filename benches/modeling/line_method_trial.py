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
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import posterity_encodings  # noqa: E402
from method_trial import inner_trial  # noqa: E402


def line_loss(kind, keys, numeric, tr, te, ytr, yte, work, extra, time):
    """Seed 0's encodings; a least-squares line through the early rows' own encodings."""
    ftr, fte = posterity_encodings(tr, te, ytr, keys, 0, None, work, extra, time)
    xtr = np.column_stack([np.ones(len(ftr)), ftr.to_numpy(dtype=float)])
    xte = np.column_stack([np.ones(len(fte)), fte.to_numpy(dtype=float)])
    beta, *_ = np.linalg.lstsq(xtr, ytr.values.astype(float), rcond=None)
    return float(np.mean((yte.values.astype(float) - xte @ beta) ** 2))


if __name__ == "__main__":
    inner_trial(line_loss, ".6g")
