"""Messy key text (`--normalize-keys`): the task's keys as they are, then with a share of their
values respelled the way hand-typed or merged sources respell them (upper or lower case, spaces
around, inner spaces doubled, fullwidth letters and digits — Unicode compatibility forms), in
training and scored rows alike, encoded without and with `--normalize-keys`. The respelling is
ours (a synthetic corruption of real keys, seeded); the data and protocol are evaluate.py's. Seeds
0 and 1; k-fold encodings (encode's defaults without a time).

    POSTERITY_BIN=target/release/posterity target/modeling-venv/bin/python \\
        benches/modeling/messy_keys_probe.py [baseball males_wage flights_late ...]
"""
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from evaluate import posterity_mean_score, split, task_named  # noqa: E402

SHARE = 0.3  # of each key's values respelled


def fullwidth(text):
    """ASCII letters and digits as their fullwidth forms (NFKC folds them back)."""
    return "".join(chr(ord(c) + 0xFEE0) if c.isascii() and c.isalnum() else c for c in text)


def respell(value, how):
    return [value.upper(), value.lower(), f" {value} ", value.replace(" ", "  "),
            fullwidth(value)][how]


def messy(frame, keys, rng):
    out = frame.copy()
    for k in keys:
        values = out[k].to_numpy(dtype=object)
        pick = rng.random(len(values)) < SHARE
        how = rng.integers(0, 5, len(values))
        values[pick] = [respell(v, h) for v, h in zip(values[pick], how[pick])]
        out[k] = values
    return out


def main():
    for prefix in sys.argv[1:] or ["baseball", "males_wage", "flights_late"]:
        name, loader, kind = task_named(prefix)
        keys, numeric, tr, te, ytr, yte = split(loader)
        rng = np.random.default_rng(7)
        mtr, mte = messy(tr, keys, rng), messy(te, keys, rng)
        with tempfile.TemporaryDirectory() as d:
            for label, (a, b, extra) in {
                "keys as they are": (tr, te, []),
                "respelled": (mtr, mte, []),
                "respelled, --normalize-keys": (mtr, mte, ["--normalize-keys"]),
            }.items():
                score = posterity_mean_score(kind, keys, numeric, a, b, ytr, yte, Path(d), extra,
                                             None)
                print(f"{prefix:<14} {label:<30} {score:.4f}", flush=True)


if __name__ == "__main__":
    main()
