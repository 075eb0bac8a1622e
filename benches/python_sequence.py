"""Several encodes in one Python process, as a notebook runs them: as-of, k-fold and
scored, the same again, as-of; wall, user and system time and peak memory of each.

    POSTERITY_BIN=target/release/posterity python benches/python_sequence.py

Needs the extension installed (`pip install ./python`) and the release shell, which
writes the data (2 M rows, keys of 3,001 / 401 / 20,011 / 97 levels, a 0/1 target, 400
days) to target/many-keys/big.parquet when it is missing.
"""

import os
import resource
import subprocess
import time

import posterity

DATA = "target/many-keys/big.parquet"
KEYS = ["clinic", "breed", "vet", "area"]

if not os.path.exists(DATA):
    os.makedirs(os.path.dirname(DATA), exist_ok=True)
    subprocess.run(
        [os.environ.get("POSTERITY_BIN", "target/release/posterity"), "-q", "-c",
         "COPY (SELECT v AS id, v / 5000 AS day, CAST(v * 2654435761 % 1000 < 200 AS INT) AS y, "
         "'clinic_' || CAST(v * 7919 % 3001 AS VARCHAR) AS clinic, "
         "'breed_' || CAST(v * 104729 % 401 AS VARCHAR) AS breed, "
         "'vet_' || CAST(v * 15485863 % 20011 AS VARCHAR) AS vet, "
         "'area_' || CAST(v * 31 % 97 AS VARCHAR) AS area "
         f"FROM generate_series(1, 2000000) g(v)) TO '{DATA}' STORED AS PARQUET"],
        check=True)


def run(what, **options):
    start, before = time.time(), resource.getrusage(resource.RUSAGE_SELF)
    posterity.encode(DATA, target="y", columns=KEYS, **options)
    after = resource.getrusage(resource.RUSAGE_SELF)
    print(f"{what:16} {time.time() - start:6.2f} s wall, {after.ru_utime - before.ru_utime:6.2f} s "
          f"user, {after.ru_stime - before.ru_stime:6.2f} s system, peak {after.ru_maxrss // 1024} MB",
          flush=True)


run("as-of", time_column="day")
run("k-fold + scored", score=DATA)
run("k-fold + scored", score=DATA)
run("as-of", time_column="day")
