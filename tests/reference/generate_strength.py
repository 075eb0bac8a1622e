"""The strength of child levels' priors centred on their parents, fitted with scipy, for
tests/it/empirical.rs (`fit_strength` and `posterior_under`).

Makes 40 parents and 600 children (each child under one parent; true strength 25):
binary outcomes (parent rate from Beta(4, 16), a child's rate from Beta(25 m, 25 (1 - m))
around its parent's rate m, 1..150 trials) and counts with exposure (parent rate from
Gamma(3, 1), a child's from Gamma(25 m, 25), exposure 0.5..60). Writes them to
strength_levels.csv. Each child's prior is centred on its parent's posterior (parent prior
Beta(1, 1) or Gamma(1, 1)) without the child's own rows: mean
(a + S_parent - s_child) / (a + b + N_parent - n_child). The strength s maximising the sum of
scipy.stats.betabinom.logpmf (binary) or scipy.stats.nbinom.logpmf (counts) over the
children is found on log s: a grid of 2,001 points over [1e-3, 1e6], then
scipy.optimize.minimize_scalar (bounded) between the grid's neighbours. Writes
strength_fit.csv.

Run: target/modeling-venv/bin/python tests/reference/generate_strength.py
"""
import os

import numpy as np
import scipy
from scipy import optimize, stats

HERE = os.path.dirname(os.path.abspath(__file__))
rng = np.random.default_rng(20261203)
parents, children, strength = 40, 600, 25.0
parent_of = rng.integers(0, parents, size=children)

beta_m = rng.beta(4.0, 16.0, size=parents)
p = rng.beta(strength * beta_m[parent_of], strength * (1 - beta_m[parent_of]))
trials = rng.integers(1, 151, size=children)
successes = rng.binomial(trials, p)

gamma_m = rng.gamma(3.0, 1.0, size=parents)
rate = rng.gamma(strength * gamma_m[parent_of], 1.0 / strength)
exposure = np.round(rng.uniform(0.5, 60.0, size=children), 3)
events = rng.poisson(rate * exposure)

with open(os.path.join(HERE, "strength_levels.csv"), "w") as f:
    f.write("child,parent,successes,trials,events,exposure\n")
    for c in range(children):
        f.write(f"c{c},p{parent_of[c]},{successes[c]},{trials[c]},{events[c]},{exposure[c]}\n")


def centre(own_top, own_bottom, a, b):
    """Each child's centre: the parent's posterior mean without the child's rows."""
    top = np.bincount(parent_of, own_top, parents)[parent_of]
    bottom = np.bincount(parent_of, own_bottom, parents)[parent_of]
    return (a + top - own_top) / (b + bottom - own_bottom)


beta_centre = centre(successes, trials, 1.0, 2.0)
gamma_centre = centre(events, exposure, 1.0, 1.0)


def beta_ll(s):
    return stats.betabinom.logpmf(successes, trials, s * beta_centre, s * (1 - beta_centre)).sum()


def gamma_ll(s):
    return stats.nbinom.logpmf(events, s * gamma_centre, s / (s + exposure)).sum()


def fit(ll):
    grid = np.linspace(np.log(1e-3), np.log(1e6), 2001)
    values = [ll(np.exp(g)) for g in grid]
    k = int(np.argmax(values))
    lo, hi = grid[max(k - 1, 0)], grid[min(k + 1, len(grid) - 1)]
    r = optimize.minimize_scalar(lambda g: -ll(np.exp(g)), bounds=(lo, hi), method="bounded",
                                 options={"xatol": 1e-10})
    return float(np.exp(r.x))


with open(os.path.join(HERE, "strength_fit.csv"), "w") as f:
    f.write(f"# scipy {scipy.__version__}, numpy {np.__version__}, seed 20261203\n")
    f.write("family,strength\n")
    f.write(f"beta,{fit(beta_ll)!r}\n")
    f.write(f"gamma,{fit(gamma_ll)!r}\n")
