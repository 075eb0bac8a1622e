"""Beta-binomial maximum marginal likelihood with scipy, for tests/empirical.rs.

Makes a data set of 400 levels (trials 1..200, true prior Beta(3, 27)), writes it to
tests/reference/betabinom_levels.csv, maximises sum(scipy.stats.betabinom.logpmf)
over (a, b) with scipy.optimize (Nelder-Mead on log parameters, then BFGS), and
writes the result to tests/reference/betabinom_fit.csv.

Run: python3 tests/reference/generate_betabinom.py
"""
import os

import numpy as np
import scipy
from scipy import optimize, stats

HERE = os.path.dirname(os.path.abspath(__file__))
rng = np.random.default_rng(20261202)
levels = 400
trials = rng.integers(1, 201, size=levels)
p = rng.beta(3.0, 27.0, size=levels)
successes = rng.binomial(trials, p)

with open(os.path.join(HERE, "betabinom_levels.csv"), "w") as f:
    f.write("successes,trials\n")
    for s, n in zip(successes, trials):
        f.write(f"{s},{n}\n")


def nll(theta):
    a, b = np.exp(theta)
    return -np.sum(stats.betabinom.logpmf(successes, trials, a, b))


start = np.log([1.0, 9.0])
r1 = optimize.minimize(nll, start, method="Nelder-Mead",
                       options={"xatol": 1e-13, "fatol": 1e-13, "maxiter": 20000, "maxfev": 40000})
r2 = optimize.minimize(nll, r1.x, method="BFGS", options={"gtol": 1e-10})
best = r2 if r2.fun <= r1.fun else r1
a, b = np.exp(best.x)
with open(os.path.join(HERE, "betabinom_fit.csv"), "w") as f:
    f.write(f"# scipy {scipy.__version__}, numpy {np.__version__}: maximise sum betabinom.logpmf; "
            f"Nelder-Mead then BFGS on log(a), log(b); final negative log-likelihood {float(best.fun)!r}\n")
    f.write("a,b\n")
    f.write(f"{float(a)!r},{float(b)!r}\n")
print(a, b, best.fun)
