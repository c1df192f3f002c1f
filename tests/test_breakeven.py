"""Break-even algebra checked against statsmodels fits and scipy root finding."""
from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import optimize, stats

from explorer import breakeven as be


def _two_arm_lines(seed: int, n: int = 400, slope_gap: float = 1.0):
    rng = np.random.default_rng(seed)
    x1, x2 = rng.uniform(0, 10, n), rng.uniform(0, 10, n)
    y1 = 1.0 + 0.2 * x1 + rng.normal(0, 2.0, n)
    y2 = 3.0 + (0.2 + slope_gap * 0.4) * x2 + rng.normal(0, 1.0, n)
    return x1, y1, x2, y2


@pytest.mark.parametrize("seed,gap", [(1, 1.0), (2, 0.25), (3, 0.05)])
def test_fieller_set_is_complement_of_johnson_neyman_from_separate_statsmodels_fits(seed, gap):
    # Outside reference: statsmodels OLS fitted separately per arm (arm-specific residual variances, as
    # DESIGN 2b asks); the Johnson-Neyman boundaries are found independently by scipy's brentq where the
    # conditional-effect z statistic equals the critical value (Johnson & Neyman 1936).
    x1, y1, x2, y2 = _two_arm_lines(seed, slope_gap=gap)
    f1 = sm.OLS(y1, sm.add_constant(x1)).fit()
    f2 = sm.OLS(y2, sm.add_constant(x2)).fit()
    a, b = f1.params[0] - f2.params[0], f1.params[1] - f2.params[1]
    V = f1.cov_params() + f2.cov_params()
    crit = stats.norm.ppf(0.975)

    def zstat(x):
        return (a + b * x) / math.sqrt(V[0, 0] + 2 * x * V[0, 1] + x * x * V[1, 1])

    lo, hi, shape = be.fieller_set(a, b, V, crit)
    root = -a / b
    # |z| - crit changes sign at the Johnson-Neyman boundaries; search both sides of the root
    g = lambda x: abs(zstat(x)) - crit  # noqa: E731
    if shape == "finite":
        jn_lo = optimize.brentq(g, root - 1e4, root)
        jn_hi = optimize.brentq(g, root, root + 1e4)
        assert lo == pytest.approx(jn_lo, abs=1e-8)
        assert hi == pytest.approx(jn_hi, abs=1e-8)
        assert lo < root < hi
    elif shape == "two_rays":
        # the difference is not clearly non-zero far out on both sides; the clear region lies between
        mid = 0.5 * (lo + hi)
        assert g(mid) > 0 and g(lo - 1.0) < 0 and g(hi + 1.0) < 0
        assert abs(zstat(lo)) == pytest.approx(crit, abs=1e-8)
        assert abs(zstat(hi)) == pytest.approx(crit, abs=1e-8)
    else:
        assert shape == "unbounded"
        xs = np.linspace(root - 1e3, root + 1e3, 2001)
        assert all(g(x) <= 1e-9 for x in xs)


def test_fieller_against_pooled_statsmodels_interaction_model():
    # Outside reference: a statsmodels OLS interaction model y ~ arm * x (pooled residual variance). Using
    # its coefficient covariance, each end of our Fieller set is where the model's conditional-effect
    # t statistic (from statsmodels' t_test) equals the t critical value.
    rng = np.random.default_rng(11)
    n = 300
    x = rng.uniform(0, 10, 2 * n)
    arm = np.repeat([1.0, 0.0], n)
    y = 2.0 + 1.0 * arm + 0.1 * x - 0.3 * arm * x + rng.normal(0, 1.0, 2 * n)
    X = np.column_stack([np.ones_like(x), arm, x, arm * x])
    fit = sm.OLS(y, X).fit()
    cov = fit.cov_params()
    V = np.array([[cov[1, 1], cov[1, 3]], [cov[3, 1], cov[3, 3]]])
    crit = stats.t.ppf(0.975, fit.df_resid)
    lo, hi, shape = be.fieller_set(fit.params[1], fit.params[3], V, crit)
    assert shape == "finite"
    for end in (lo, hi):
        t = fit.t_test(np.array([[0, 1, 0, end]])).tvalue.item()
        assert abs(t) == pytest.approx(crit, rel=1e-7)


def test_fieller_shapes_from_known_quadratics():
    # Hand-worked cases: a=0, b=1, unit variances and zero covariance; crit=1.96.
    # (b^2 - c^2) x^2 ... with var_b = 0.01 -> finite; var_b large -> unbounded or two rays.
    crit = 1.96
    lo, hi, shape = be.fieller_set(0.0, 1.0, np.array([[0.04, 0.0], [0.0, 0.01]]), crit)
    assert shape == "finite"
    half = crit * 0.2 / math.sqrt(1 - crit ** 2 * 0.01)
    assert lo == pytest.approx(-half) and hi == pytest.approx(half)
    assert be.fieller_set(0.0, 0.1, np.array([[0.04, 0.0], [0.0, 1.0]]), crit)[2] == "unbounded"
    # a=1, b=0.1, var(a)=0.01, var(b)=1: the slope is not clearly non-zero, the level at 0 is; the set is
    # two rays whose inner ends solve (1 + 0.1x)^2 = 1.96^2 (0.01 + x^2) by the quadratic formula.
    lo, hi, shape = be.fieller_set(1.0, 0.1, np.array([[0.01, 0.0], [0.0, 1.0]]), crit)
    qa, qb, qc = 0.01 - crit ** 2, 0.2, 1 - crit ** 2 * 0.01
    r = sorted(np.roots([qa, qb, qc]))
    assert shape == "two_rays"
    assert lo == pytest.approx(r[0]) and hi == pytest.approx(r[1]) and lo < 0 < hi


def test_find_roots_matches_scipy_on_a_cubic():
    # Outside reference: numpy's polynomial roots for x^3 - 6x^2 + 11x - 6 (roots 1, 2, 3).
    f = lambda x: (x - 1) * (x - 2) * (x - 3)  # noqa: E731
    roots = be.find_roots(f, 0.0, 4.0)
    expected = np.sort(np.roots([1, -6, 11, -6]).real)
    np.testing.assert_allclose(roots, expected, atol=1e-9)
    assert be.find_roots(lambda x: x * 0 + 1.0, 0, 1) == []


def test_delta_root_interval_matches_hand_formula():
    lo, hi, shape = be.delta_root_interval(2.0, 0.04, -0.5, 1.96)
    assert shape == "finite"
    assert lo == pytest.approx(2.0 - 1.96 * 0.2 / 0.5) and hi == pytest.approx(2.0 + 1.96 * 0.2 / 0.5)
    assert be.delta_root_interval(2.0, 0.04, 0.0, 1.96)[2] == "unbounded"


def test_regions_split_by_sign():
    grid = np.linspace(0, 10, 11)
    diff = 1.0 - 0.2 * grid
    lower, upper = diff - 0.3, diff + 0.3
    regs = be.regions(grid, lower, upper, 0.0, "first", "second")
    assert [(r.start, r.stop, r.favours) for r in regs] == [(0.0, 3.0, "first"), (7.0, 10.0, "second")]


def test_percentile_interval_keeps_unbounded_ends():
    v = np.r_[np.linspace(0, 1, 90), np.full(10, np.inf)]
    lo, hi = be.percentile_interval(v, 0.95)
    assert lo is not None and hi is None
    lo, hi = be.percentile_interval(np.linspace(0, 1, 101), 0.9)
    assert lo == pytest.approx(0.05) and hi == pytest.approx(0.95)


def test_contains_reads_every_interval_shape():
    assert be.contains((1.0, 2.0), "finite", 1.5) and not be.contains((1.0, 2.0), "finite", 2.5)
    assert be.contains((None, 2.0), "unbounded_below", -1e9) and not be.contains((None, 2.0), "unbounded_below", 3)
    assert be.contains((-1.0, 1.0), "two_rays", 5.0) and not be.contains((-1.0, 1.0), "two_rays", 0.0)
    assert be.contains((None, None), "unbounded", 0.0)


@pytest.mark.parametrize("a, b, cov", [(-2.0, 0.5, np.array([[0.09, -0.01], [-0.01, 0.004]])),  # inside the grid
                                       (-2.0, 0.5, np.array([[0.09, -0.01], [-0.01, 0.06]])),  # ends past it
                                       (-2.0, 0.5, np.array([[0.09, -0.01], [-0.01, 0.08]]))])  # two rays
def test_test_inversion_is_fiellers_set_for_a_straight_line(a, b, cov):
    """Inverting the pointwise test of a + b x = 0 gives Fieller's set (Fieller, J R Stat Soc B 1954):
    {x : (a + b x)^2 <= z^2 var(a + b x)}, here found on a coarse grid and refined, against the quadratic's roots;
    a side that passes the end of the searched grid is reported open."""
    z = 1.959963984540054
    g = lambda x: (a + b * x) ** 2 - z * z * (cov[0, 0] + 2 * x * cov[0, 1] + x * x * cov[1, 1])  # noqa: E731
    lo, hi, shape = be.fieller_set(a, b, cov, z)
    grid = np.linspace(-20.0, 40.0, 61)
    got = be.inverted_test_interval(g, -a / b, grid)
    if shape == "finite" and hi < grid[-1]:
        assert got[2] == "finite" and got[:2] == pytest.approx((lo, hi), abs=1e-8)
    elif shape == "finite":
        assert got[2] == "unbounded_above" and got[0] == pytest.approx(lo, abs=1e-8)
    else:  # two rays: the stretch around the root is the upper ray
        assert shape == "two_rays" and got[2] == "unbounded_above" and got[0] == pytest.approx(hi, abs=1e-8)
