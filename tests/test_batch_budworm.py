"""The published check of a sampled ensemble's aggregation: the spruce budworm.

Model (Strogatz, Nonlinear Dynamics and Chaos, section 3.7, dimensionless
form, eq. 3.7.3 from memory): x' = r x (1 - x/k) - x^2 / (1 + x^2). Its folds
lie on the curve given parametrically by
    r = 2 x^3 / (1 + x^2)^2,   k = 2 x^3 / (x^2 - 1),   x > 1
(Strogatz, same section, from memory; it follows from requiring the
equilibrium condition and its x-derivative to vanish together). For a given
k > 3 sqrt(3) the equation 2 x^3 - k x^2 + k = 0 has two roots x > 1, one on
each side of sqrt(3), so the fold locations in r are closed-form functions of k.

We sample k from a truncated normal law, run the batch, and check
1. each member's two folds against the closed form (relative 1e-9), and
2. the distribution of each fold location across members against the
   distribution of k transformed analytically through that closed form
   (both branches are decreasing in k, so P(r_fold <= y) = 1 - F_k(k(y))), by
   a one-sample Kolmogorov-Smirnov test at level 0.01.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import brentq
from scipy.stats import kstest, truncnorm

import branchline

# The sampled carrying capacity: normal(10, 1.5) truncated to [6, 14], above
# the cusp at k = 3 sqrt(3) ~ 5.196 so that every member has two folds.
K_MEAN, K_SD, K_LOW, K_HIGH = 10.0, 1.5, 6.0, 14.0
MEMBERS = 64
KS_LEVEL = 0.01
CUSP_X = math.sqrt(3.0)

BUDWORM = {
    "title": "budworm outbreak threshold",
    "model": {
        "parameters": {"r": 0.1, "k": 10.0},
        "equations": {"x": "r*x*(1 - x/k) - x^2/(1 + x^2)"},
    },
    # Start on the refuge branch at low r; the trace climbs over both folds.
    "trace": [{"name": "refuge", "vary": "r", "interval": [0.05, 0.9], "start": {"x": 0.1}}],
    "ensemble": {
        "samples": MEMBERS,
        "seed": 2026,
        "draw": {"k": {"normal": [K_MEAN, K_SD], "within": [K_LOW, K_HIGH]}},
    },
}


def r_on_curve(x: float) -> float:
    return 2 * x**3 / (1 + x**2) ** 2


def k_on_curve(x: float) -> float:
    return 2 * x**3 / (x**2 - 1)


def fold_locations(k: float) -> tuple[float, float]:
    """The two fold values of r for carrying capacity k, from the roots of 2x^3 - k x^2 + k."""
    roots = np.roots([2.0, -k, 0.0, k])
    real = sorted(z.real for z in roots if abs(z.imag) < 1e-12 and z.real > 1)
    # Polish each root with Brent's method on its side of sqrt(3).
    inner = brentq(lambda x: 2 * x**3 - k * x**2 + k, 1 + 1e-12, CUSP_X, xtol=1e-15)
    outer = brentq(lambda x: 2 * x**3 - k * x**2 + k, CUSP_X, 2 * k, xtol=1e-15)
    assert math.isclose(inner, real[0], rel_tol=1e-8) and math.isclose(outer, real[1], rel_tol=1e-8)
    return r_on_curve(inner), r_on_curve(outer)


def transformed_cdf(inner: bool):
    """CDF of a fold location when k follows the truncated normal law."""
    law = truncnorm((K_LOW - K_MEAN) / K_SD, (K_HIGH - K_MEAN) / K_SD, loc=K_MEAN, scale=K_SD)
    top = r_on_curve(CUSP_X)

    def k_at(y: float) -> float:
        # The x on the chosen side of sqrt(3) where the fold curve has r = y.
        if inner:
            x = brentq(lambda x: r_on_curve(x) - y, 1 + 1e-12, CUSP_X, xtol=1e-15)
        else:
            x = brentq(lambda x: r_on_curve(x) - y, CUSP_X, 1e6, xtol=1e-15)
        return k_on_curve(x)

    def cdf(values):
        values = np.atleast_1d(values)
        out = np.empty(values.shape)
        for i, y in enumerate(values):
            low = 0.5 if inner else 0.0  # r on the inner side lies in (1/2, top)
            out[i] = 0.0 if y <= low else 1.0 if y >= top else 1.0 - law.cdf(k_at(y))
        return out

    return cdf


def test_budworm_fold_distribution_matches_the_analytic_transform(tmp_path):
    result = branchline.run_batch([BUDWORM], tmp_path / "budworm", jobs=1)
    assert result.complete and result.failed == 0 and len(result.members) == MEMBERS
    upper, lower = [], []
    for member in result.members.itertuples():
        folds = result.events[(result.events["member"] == member.member)]
        assert list(folds["kind"]) == ["fold", "fold"]
        # Met in trace order: first the upper fold (inner root), then the lower one.
        expected = fold_locations(member.k)
        got = tuple(folds["r"])
        assert math.isclose(got[0], expected[0], rel_tol=1e-9)
        assert math.isclose(got[1], expected[1], rel_tol=1e-9)
        upper.append(got[0])
        lower.append(got[1])
    for values, inner in ((upper, True), (lower, False)):
        test = kstest(values, transformed_cdf(inner))
        assert test.pvalue > KS_LEVEL, test
    report = (tmp_path / "budworm" / "report.md").read_text()
    assert "fold 1 on refuge" in report and "fold 2 on refuge" in report
