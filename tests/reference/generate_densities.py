"""Reference densities of the Beta, Gamma and located, scaled Student-t marginals,
for the report's prior curves (tests/it/family_reference.rs).

Values from scipy.stats (beta.pdf, gamma.pdf with scale = 1/rate, t.pdf with loc
and scale), printed with 17 significant digits.

Run: python3 tests/reference/generate_densities.py > tests/reference/densities.csv
"""
from scipy import stats

CASES = [
    ("beta", (3.24, 27.06), [0.001, 0.05, 0.107, 0.3, 0.9]),
    ("beta", (0.5, 0.5), [1e-6, 0.25, 0.5, 0.999999]),
    ("beta", (1200.0, 8800.0), [0.11, 0.12, 0.13]),
    ("gamma", (2.5, 4.0), [0.01, 0.5, 3.0]),
    ("gamma", (0.7, 0.02), [0.1, 40.0, 500.0]),
    ("student_t", (12.0, 2.5, 3.0), [-20.0, 9.0, 12.0, 30.0]),
    ("student_t", (0.2, 0.01, 0.8), [0.2, 0.25, 5.0]),
]

print("family,p1,p2,p3,x,density")
for family, params, xs in CASES:
    for x in xs:
        if family == "beta":
            d = stats.beta.pdf(x, *params)
        elif family == "gamma":
            shape, rate = params
            d = stats.gamma.pdf(x, shape, scale=1.0 / rate)
        else:
            loc, scale, dof = params
            d = stats.t.pdf(x, dof, loc=loc, scale=scale)
        p = [repr(v) for v in params] + [""] * (3 - len(params))
        print(f"{family},{p[0]},{p[1]},{p[2]},{x!r},{d:.17g}")
