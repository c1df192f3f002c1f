"""Per-arm logistic and linear models checked against statsmodels."""
from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm

from explorer.errors import FulcrumError
from explorer.models import fit_model
from explorer.models.base import Basis, Fitted, OutcomeData
from explorer.models.glm import LinearFit, LogisticFit
from explorer.spec import OutcomeSpec
from test_models_support import close

XS = np.array([1.0, 5.0, 9.0])


@pytest.fixture(scope="module")
def sim():
    # simulated data with known logistic / linear truth
    rng = np.random.default_rng(3)
    n = 500
    x = rng.uniform(0, 10, n)
    z = rng.normal(size=(n, 2))
    eta = -1 + 0.3 * x + z @ [0.5, -0.4]
    yb = (rng.uniform(size=n) < 1 / (1 + np.exp(-eta))).astype(float)
    yc = 2 + 0.5 * x + z @ [1.0, -1.0] + rng.normal(size=n) * (1 + x / 5)
    return dict(x=x, z=z, yb=yb, yc=yc, w=rng.uniform(0.2, 3, n), cl=rng.integers(0, 30, n),
                D=sm.add_constant(np.column_stack([x, z])))


def data(sim, y, **kw) -> OutcomeData:
    return OutcomeData(x=sim["x"], y=sim[y], z=sim["z"], z_names=("a", "b"), **kw)


def design_at(fit, xs):
    return np.column_stack([np.ones(len(xs)), xs, np.tile(fit.z_ref, (len(xs), 1))])


def test_logistic_against_statsmodels(sim):
    fit = LogisticFit("b", "A", Basis(), data(sim, "yb"))
    ref = sm.GLM(sim["yb"], sim["D"], family=sm.families.Binomial()).fit(tol=1e-12)
    # statsmodels GLM Binomial: params, bse, log-likelihood, predicted mean and its delta-method SE
    close(fit.params_, ref.params)
    close(np.sqrt(np.diag(fit.cov_)), ref.bse)
    close(fit.loglik_, ref.llf)
    pred = ref.get_prediction(design_at(fit, XS))
    close(fit.measure(XS), pred.predicted_mean)
    close(np.sqrt(fit.measure_var(XS)), pred.se_mean)
    (c0, c1), cov = fit.linear_terms()
    close([c0, c1], [design_at(fit, [0.0])[0] @ ref.params, ref.params[1]])
    close(np.log(fit.measure(XS) / (1 - fit.measure(XS))), c0 + c1 * XS)
    assert fit.n_events_ == int(sim["yb"].sum()) and fit.converged_


def test_logistic_robust_cluster_and_weights(sim):
    D, y = sim["D"], sim["yb"]
    # statsmodels Logit cov_type HC0, and cluster without small-sample correction
    fit = LogisticFit("b", "A", Basis(), data(sim, "yb"), robust=True)
    close(fit.cov_, sm.Logit(y, D).fit(disp=0, cov_type="HC0").cov_params())
    fit = LogisticFit("b", "A", Basis(), data(sim, "yb", cluster=sim["cl"]), robust=True)
    ref = sm.Logit(y, D).fit(disp=0, cov_type="cluster", cov_kwds=dict(groups=sim["cl"], use_correction=False))
    close(fit.cov_, ref.cov_params())
    # weights: model-based = statsmodels freq_weights; robust = var_weights HC0 (probability weights)
    fit = LogisticFit("b", "A", Basis(), data(sim, "yb", weights=sim["w"]))
    ref = sm.GLM(y, D, family=sm.families.Binomial(), freq_weights=sim["w"]).fit(tol=1e-12)
    close(fit.params_, ref.params)
    close(fit.cov_, ref.cov_params())
    fit = LogisticFit("b", "A", Basis(), data(sim, "yb", weights=sim["w"]), robust=True)
    ref = sm.GLM(y, D, family=sm.families.Binomial(), var_weights=sim["w"]).fit(tol=1e-12, cov_type="HC0")
    close(fit.cov_, ref.cov_params())


def test_linear_against_statsmodels(sim):
    D, y = sim["D"], sim["yc"]
    fit = LinearFit("c", "A", Basis(), data(sim, "yc"))
    ref = sm.OLS(y, D).fit()
    # statsmodels OLS: params, covariance, log-likelihood, predicted mean SE
    close(fit.params_, ref.params)
    close(fit.cov_, ref.cov_params())
    close(fit.loglik_, ref.llf)
    pred = ref.get_prediction(design_at(fit, XS))
    close(fit.measure(XS), pred.predicted_mean)
    close(np.sqrt(fit.measure_var(XS)), pred.se_mean)
    (c0, c1), cov = fit.linear_terms()
    close(c0 + c1 * XS, fit.measure(XS))
    G = np.column_stack([np.ones(3), XS])
    close(np.einsum("ij,jk,ik->i", G, cov, G), fit.measure_var(XS))


def test_linear_sandwich_choices(sim):
    D, y = sim["D"], sim["yc"]
    # bounded outcome, unweighted: statsmodels OLS cov_type HC3
    fit = LinearFit("c", "A", Basis(), data(sim, "yc"), bounded=True)
    close(fit.cov_, sm.OLS(y, D).fit(cov_type="HC3").cov_params())
    assert fit.cov_kind_ == "HC3" and "HC3" in fit.method_
    # weighted: statsmodels WLS cov_type HC0; model-based: GLM freq_weights
    fit = LinearFit("c", "A", Basis(), data(sim, "yc", weights=sim["w"]), robust=True)
    close(fit.cov_, sm.WLS(y, D, weights=sim["w"]).fit(cov_type="HC0").cov_params())
    fit = LinearFit("c", "A", Basis(), data(sim, "yc", weights=sim["w"]))
    close(fit.cov_, sm.GLM(y, D, freq_weights=sim["w"]).fit().cov_params())
    # clustered: statsmodels cluster without small-sample correction
    fit = LinearFit("c", "A", Basis(), data(sim, "yc", cluster=sim["cl"]), robust=True)
    ref = sm.OLS(y, D).fit(cov_type="cluster", cov_kwds=dict(groups=sim["cl"], use_correction=False))
    close(fit.cov_, ref.cov_params())


def test_spline_basis_against_statsmodels(sim):
    basis = Basis.from_index(sim["x"], "spline", 5)
    Ds = sm.add_constant(np.column_stack([basis(sim["x"]), sim["z"]]))
    # statsmodels on the same spline design columns
    fit = LogisticFit("b", "A", basis, data(sim, "yb"))
    ref = sm.GLM(sim["yb"], Ds, family=sm.families.Binomial()).fit(tol=1e-12)
    close(fit.params_, ref.params)
    close(np.sqrt(np.diag(fit.cov_)), ref.bse)
    fit = LinearFit("c", "A", basis, data(sim, "yc"))
    ref = sm.OLS(sim["yc"], Ds).fit()
    close(fit.params_, ref.params)
    close(fit.cov_, ref.cov_params())
    assert fit.linear_terms() is None


def test_separation_is_flagged():
    x = np.r_[np.linspace(0, 1, 20), np.linspace(2, 3, 20)]
    y = np.r_[np.zeros(20), np.ones(20)]
    fit = LogisticFit("b", "A", Basis(), OutcomeData(x=x, y=y))
    assert not fit.converged_
    assert any("separation" in w for w in fit.warnings_)


def test_dispatch_protocol_and_bad_input(sim):
    binary = OutcomeSpec(name="b", kind="binary", column="b")
    cont = OutcomeSpec(name="c", kind="continuous", column="c", bounds=(0.0, 180.0))
    fb = fit_model(binary, "A", Basis(), data(sim, "yb"))
    fc = fit_model(cont, "A", Basis(), data(sim, "yc"))
    assert isinstance(fb, Fitted) and isinstance(fb, LogisticFit)
    assert isinstance(fc, LinearFit) and fc.robust_  # bounds imply sandwich standard errors
    assert fb.distribution(XS) is None and fc.distribution_jacobian(XS) is None
    with pytest.raises(FulcrumError, match="0 or 1") as err:
        fit_model(binary, "A", Basis(), OutcomeData(x=sim["x"], y=np.r_[2.0, sim["yb"][1:]]))
    assert err.value.rows == [1]
    with pytest.raises(FulcrumError, match="same value"):
        fit_model(binary, "A", Basis(), OutcomeData(x=sim["x"], y=np.ones(len(sim["x"]))))
    with pytest.raises(FulcrumError, match="missing or non-numeric") as err:
        fit_model(cont, "A", Basis(), OutcomeData(x=np.r_[np.nan, sim["x"][1:]], y=sim["yc"]))
    assert err.value.rows == [1]
