"""`fulcrum analyse --check-reference`: refit every per-arm model with the reference libraries and report the
largest differences (DESIGN.md 2a), against the tolerance of DESIGN.md 2b.

Each outcome x index x arm of a FitSet is fitted again, on the same rows, the same design (the pair's index
basis, linear or spline, then the adjustment covariates) and the same case weights:

- survival, Cox: lifelines CoxPHFitter (Efron ties, its only method; Breslow baseline);
- survival, Weibull: lifelines WeibullAFTFitter, whose S(t | x) = exp(-(t / exp(mu(x)))^rho) is the model's own
  parametrisation (log-scale coefficients, then log rho);
- binary: statsmodels Logit (GLM Binomial with frequency weights when the fit was weighted);
- continuous: statsmodels OLS (WLS when weighted), with the sandwich the model used (HC3, HC0 or by cluster);
- ordinal: statsmodels OrderedModel with the logit link, on the levels the arm reached.

Per model it reports the largest absolute difference in the coefficients, in the standard errors, and in the
measure (survival or restricted mean at the horizon, probability, mean) along the index's observed range, with
covariates held where the model holds them. Agreement is |ours - reference| <= 1e-5 + 1e-5 |reference| for every
number. The models stop Newton-Raphson at a score below 1e-9; the references are asked to converge as tightly
(lifelines' Cox Newton to precision 1e-12 instead of 1e-7, its Weibull SLSQP to ftol 1e-16 instead of 1e-10, where
its default stops with a score near 1e-2 and coefficients 2e-5 away on the invented demo; statsmodels' ordinal
fit BFGS then Newton), so the tolerance measures differences of model, not of stopping rules. Standard errors of
the ordinal cut-points come from statsmodels' numerical Hessian, which agrees to about 1e-6.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import integrate
from scipy.special import expit

from .models import CoxFit, LinearFit, LogisticFit, OrdinalFit, WeibullFit

ABS_TOL = 1e-5  # DESIGN.md 2b: agreement with reference libraries, absolute
REL_TOL = 1e-5  # and relative
GRID = 41  # index values, evenly over the observed range, at which the measures are compared


@dataclass
class ModelCheck:
    """One per-arm model against its reference fit."""

    outcome: str
    index: str
    arm: str
    model: str  # cox | weibull | logistic | linear | ordinal
    reference: str  # the reference library's fitter, in words
    measure: str
    n: int
    coefficients: float | None = None  # largest |ours - reference| over the coefficients
    standard_errors: float | None = None
    predictions: float | None = None  # largest |ours - reference| of the measure along the index grid
    tolerance: tuple[float, float] = (ABS_TOL, REL_TOL)
    agrees: bool = True
    checked: bool = True  # False when nothing could be compared (the note says why)
    worst: str = ""  # which number came closest to (or went past) its tolerance
    note: str = ""

    def as_dict(self) -> dict:
        return {"outcome": self.outcome, "index": self.index, "arm": self.arm, "model": self.model,
                "reference": self.reference, "measure": self.measure, "n": self.n,
                "coefficients": _num(self.coefficients), "standard_errors": _num(self.standard_errors),
                "predictions": _num(self.predictions),
                "tolerance": {"absolute": self.tolerance[0], "relative": self.tolerance[1]},
                "agrees": self.agrees, "checked": self.checked, "worst": self.worst, "note": self.note}


@dataclass
class ReferenceCheck:
    models: list[ModelCheck] = field(default_factory=list)

    @property
    def agrees(self) -> bool:
        return all(m.agrees for m in self.models)

    @property
    def disagreeing(self) -> list[ModelCheck]:
        return [m for m in self.models if not m.agrees]

    def as_dict(self) -> dict:
        """The `reference_check` section of the results document."""
        def largest(attr: str) -> float | None:
            vals = [getattr(m, attr) for m in self.models if getattr(m, attr) is not None]
            return _num(max(vals)) if vals else None

        return {"agrees": self.agrees, "tolerance": {"absolute": ABS_TOL, "relative": REL_TOL},
                "largest": {"coefficients": largest("coefficients"), "standard_errors": largest("standard_errors"),
                            "predictions": largest("predictions")},
                "models": [m.as_dict() for m in self.models]}


def _num(v: float | None) -> float | None:
    return None if v is None else float(f"{v:.3g}")


def check_reference(fs: Any) -> ReferenceCheck:
    """Refit every model of the FitSet `fs` (explorer.analysis.fit_all) with the reference libraries."""
    out = ReferenceCheck()
    for (outcome, index), pf in fs.pairs.items():
        for arm, fit in pf.fits.items():
            out.models.append(check_model(fit, pf.data[arm], pf.basis, outcome, index, arm))
    return out


def check_model(fit: Any, data: Any, basis: Any, outcome: str, index: str, arm: str) -> ModelCheck:
    """One per-arm model (a fitted explorer.models class) against its reference fit on the same data."""
    w = np.ones(len(data.x)) if data.weights is None else np.asarray(data.weights, float)
    keep = w > 0
    X = _design(basis, data)[keep]
    w = w[keep]
    grid = np.linspace(float(np.min(data.x[keep])), float(np.max(data.x[keep])), GRID)
    G = fit.rows(grid)  # the model's own rows: basis(grid), covariates held at z_ref
    weighted = data.weights is not None
    cluster = None if data.cluster is None else np.asarray(data.cluster)[keep]
    try:
        ref = _refit(fit, X, data, keep, w, weighted, cluster, G)
    except Exception as exc:  # any failure of a reference library is reported, not raised
        return ModelCheck(outcome, index, arm, type(fit).__name__, "none", "", int(keep.sum()), agrees=False,
                          note=f"the reference fit failed ({type(exc).__name__}: {exc})")
    if ref is None:
        return ModelCheck(outcome, index, arm, type(fit).__name__, "none", "", int(keep.sum()), agrees=False,
                          note="no reference fitter for this model")
    kind, reference, params, se, pred, note, se_judged = ref
    tol = (ABS_TOL, REL_TOL)
    ours_se = np.sqrt(np.diag(fit.cov_))
    mc = ModelCheck(outcome, index, arm, kind, reference, getattr(fit, "measure_name", None) or _measure(kind),
                    int(keep.sum()), tolerance=tol, note=note)
    ratios = {}
    for name, mine, theirs in (("coefficients", fit.params_, params), ("standard_errors", ours_se, se),
                               ("predictions", fit.measure(grid), pred)):
        if theirs is None:
            continue
        mine, theirs = np.asarray(mine, float), np.asarray(theirs, float)
        if mine.shape != theirs.shape:
            mc.agrees, mc.note = False, f"{name}: {mine.shape} against the reference's {theirs.shape}"
            continue
        diff = np.abs(mine - theirs)
        setattr(mc, name, float(diff.max()) if diff.size else 0.0)
        ratio = diff / (tol[0] + tol[1] * np.abs(theirs))
        ratios[name] = float(ratio.max()) if ratio.size else 0.0
        if name == "standard_errors" and not se_judged:
            del ratios[name]  # shown, not judged: the note says why
        elif not np.all(np.isfinite(ratio)) or ratios[name] > 1:
            mc.agrees = False
    if ratios:
        mc.worst = max(ratios, key=lambda k: ratios[k])
    mc.checked = params is not None or pred is not None
    return mc


def _refit(fit, X, data, keep, w, weighted, cluster, G):
    """(model, reference in words, coefficients, standard errors, measure along the grid, note, whether the
    standard errors are judged against the tolerance), or None."""
    import lifelines  # noqa: F401  (the reference libraries: imported first, as statsmodels sets its own
    import statsmodels.api  # noqa: F401  warning filters on import, which the block below then overrides)

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # reference libraries' convergence chatter; the differences speak
        refit = REFITS.get(type(fit))
        if refit is None:
            return None
        if refit in (_cox, _weibull):  # time-to-event fitters read time and event from the data
            return refit(fit, X, data, keep, w, weighted, cluster, G)
        return refit(fit, X, np.asarray(data.y, float)[keep], w, weighted, cluster, G)


def _measure(kind: str) -> str:
    return {"logistic": "probability", "linear": "mean", "ordinal": "probability of a favourable level"}.get(kind, "")


def _design(basis: Any, data: Any) -> np.ndarray:
    """[basis(x), z]: the columns every model is fitted on (intercepts and cut-points are the fitters' own)."""
    B = basis(np.asarray(data.x, float))
    if data.z is None or not np.size(data.z):
        return B
    return np.column_stack([B, np.asarray(data.z, float).reshape(len(B), -1)])


def _names(k: int) -> list[str]:
    return [f"c{j}" for j in range(k)]


# ---- survival: lifelines -----------------------------------------------------------------------
def _survival_frame(X: np.ndarray, data: Any, keep: np.ndarray, w: np.ndarray, weighted: bool,
                    cluster: np.ndarray | None) -> pd.DataFrame:
    cols = _names(X.shape[1])
    df = pd.DataFrame(X, columns=cols)
    df["T"] = np.asarray(data.time, float)[keep]
    df["E"] = np.asarray(data.event, float)[keep]
    if weighted:
        df["W"] = w
    if cluster is not None:
        df["C"] = pd.factorize(cluster, sort=True)[0]
    return df


def _lifelines_fit(fitter: Any, df: pd.DataFrame, weighted: bool, robust: bool, **options: Any) -> None:
    """robust: lifelines' sandwich from the score residuals, summed within clusters when there are clusters."""
    if "C" in df:
        options["cluster_col"] = "C"
    fitter.fit(df, "T", "E", weights_col="W" if weighted else None, robust=robust, **options)


def _rmst(times: np.ndarray, surv: np.ndarray, horizon: float) -> np.ndarray:
    """Area under right-continuous step functions surv (rows: curves; columns: at `times`) from 0 to horizon."""
    t = times[times <= horizon]
    S = surv[:, :len(t)]
    edges = np.r_[0.0, t, horizon]
    steps = np.hstack([np.ones((len(S), 1)), S])  # S = 1 before the first time
    return steps @ np.diff(edges)


def _cox(fit: CoxFit, X, data, keep, w, weighted, cluster, G):
    from lifelines import CoxPHFitter  # the reference library, loaded only when the check runs

    df = _survival_frame(X, data, keep, w, weighted, cluster)
    cols = [c for c in df.columns if c.startswith("c")]
    cph = CoxPHFitter()  # Efron's method for ties, as ours
    # robust=True gives lifelines' sandwich from the score residuals, which is ours when the model used one
    # lifelines' Newton stops at a step of 1e-7 by default; ours at a score of 1e-9
    _lifelines_fit(cph, df, weighted, fit.robust_, fit_options={"precision": 1e-12})
    params = cph.params_[cols].to_numpy()
    se = cph.standard_errors_[cols].to_numpy()
    # lifelines' own survival curves at its event times (predict_survival_function), read as the step functions
    # they are: given times, lifelines would interpolate linearly between event times, which Breslow's does not
    times = cph.baseline_cumulative_hazard_.index.to_numpy(float)
    surv = cph.predict_survival_function(pd.DataFrame(G, columns=cols)).to_numpy().T  # (grid, times)
    if fit.measure_name == "rmst":
        pred = _rmst(times, surv, fit.horizon)
    else:
        at = int(np.searchsorted(times, fit.horizon, side="right"))
        pred = surv[:, at - 1] if at else np.ones(len(G))
    t, e = df["T"].to_numpy(), df["E"].to_numpy()
    tied = len(np.unique(t[e > 0])) < int((e > 0).sum())
    note, judged = "", True
    if fit.robust_ and tied:  # checked: on untied times lifelines' robust errors equal ours to 1e-11
        note, judged = ("robust standard errors shown, not judged: lifelines forms the score residuals at tied event "
                        "times differently (without ties the two sandwiches agree to 1e-11)"), False
    return "cox", "lifelines CoxPHFitter (Efron ties, Breslow baseline)", params, se, pred, note, judged


def _weibull(fit: WeibullFit, X, data, keep, w, weighted, cluster, G):
    from lifelines import WeibullAFTFitter  # the reference library, loaded only when the check runs

    df = _survival_frame(X, data, keep, w, weighted, cluster)
    cols = [c for c in df.columns if c.startswith("c")]
    aft = WeibullAFTFitter()
    clustered = "C" in df
    if clustered:  # lifelines' parametric fitters take no clusters; the coefficients do not depend on them
        df = df.drop(columns="C")
    # lifelines' SLSQP stops by default at ftol 1e-10, with a score near 1e-2 on the demo
    _lifelines_fit(aft, df, weighted, fit.robust_ and not clustered, fit_options={"ftol": 1e-16, "maxiter": 1000})
    lam, rho = aft.params_.loc["lambda_"], aft.params_.loc["rho_"]
    params = np.r_[lam["Intercept"], lam[cols].to_numpy(), rho["Intercept"]]
    se_l, se_r = aft.standard_errors_.loc["lambda_"], aft.standard_errors_.loc["rho_"]
    se = np.r_[se_l["Intercept"], se_l[cols].to_numpy(), se_r["Intercept"]]
    rows = pd.DataFrame(G, columns=cols)
    if fit.measure_name == "rmst":
        mu = lam["Intercept"] + G @ lam[cols].to_numpy()
        r = math.exp(rho["Intercept"])
        pred = np.array([integrate.quad(lambda t, m=m: math.exp(-((t / math.exp(m)) ** r)), 0.0, fit.horizon,
                                        epsabs=1e-11, epsrel=1e-11)[0] for m in mu])
    else:
        pred = aft.predict_survival_function(rows, times=[fit.horizon]).to_numpy()[0]
    note = "cluster-robust standard errors not checked: lifelines' Weibull fit takes no clusters" if clustered else ""
    return "weibull", "lifelines WeibullAFTFitter (same parametrisation: log scale, then log shape)", params, \
        None if clustered else se, pred, note, not clustered


# ---- binary, continuous, ordinal: statsmodels -------------------------------------------------------
def _sm_cov(fit: Any, cluster: np.ndarray | None) -> dict:
    """statsmodels' covariance options for the sandwich the model used (none: model-based)."""
    sandwich = getattr(fit, "cov_kind_", "cluster" if cluster is not None else ("HC0" if fit.robust_ else "model"))
    if not fit.robust_ or sandwich == "model":
        return {}
    if cluster is not None:  # cov_kind_ "cluster", or a robust logistic or ordinal fit with clusters
        codes = pd.factorize(cluster, sort=True)[0]
        return {"cov_type": "cluster", "cov_kwds": {"groups": codes, "use_correction": False, "df_correction": False}}
    return {"cov_type": sandwich}


def _logistic(fit: LogisticFit, X, y, w, weighted, cluster, G):
    import statsmodels.api as sm  # the reference library, loaded only when the check runs

    D = sm.add_constant(X, has_constant="add")
    cov = _sm_cov(fit, cluster)
    if weighted:
        res = sm.GLM(y, D, family=sm.families.Binomial(), freq_weights=w).fit(tol=1e-12, **cov)
        ref = "statsmodels GLM Binomial (frequency weights)"
    else:
        res = sm.Logit(y, D).fit(disp=0, method="newton", tol=1e-12, maxiter=100, **cov)
        ref = "statsmodels Logit"
    Gd = np.column_stack([np.ones(len(G)), G])
    return "logistic", ref, res.params, res.bse, expit(Gd @ res.params), "", True


def _linear(fit: LinearFit, X, y, w, weighted, cluster, G):
    import statsmodels.api as sm  # the reference library, loaded only when the check runs

    D = sm.add_constant(X, has_constant="add")
    cov = _sm_cov(fit, cluster)
    model = sm.WLS(y, D, weights=w) if weighted else sm.OLS(y, D)
    res = model.fit(**cov)
    Gd = np.column_stack([np.ones(len(G)), G])
    words = {"HC3": "HC3 sandwich", "HC0": "HC0 sandwich", "cluster": "cluster sandwich"}
    ref = f"statsmodels {'WLS' if weighted else 'OLS'}" + (f" ({words[cov['cov_type']]})" if cov else "")
    return "linear", ref, res.params, res.bse, Gd @ res.params, "", True


def _ordinal(fit: OrdinalFit, X, y, w, weighted, cluster, G):
    from statsmodels.miscmodels.ordinal_model import OrderedModel  # the reference library, loaded when run

    ref = "statsmodels OrderedModel (logit)"
    if weighted:
        return "ordinal", ref, None, None, None, "not checked: OrderedModel takes no case weights", False
    codes = np.searchsorted(fit.observed_, y.astype(int))  # the levels this arm reached, in order
    model = OrderedModel(codes, X, distr="logit")
    m = len(fit.observed_) - 1
    # BFGS from statsmodels' own start (marginal cut-points, zero slopes), then a few Newton steps to settle it
    # (the likelihood is concave; Newton alone on statsmodels' numerical Hessian takes many slow steps)
    res = model.fit(method="bfgs", disp=0, maxiter=1000, gtol=1e-8)
    res = model.fit(start_params=res.params, method="newton", disp=0, maxiter=5, tol=1e-12, **_sm_cov(fit, cluster))
    p = X.shape[1]
    cuts = model.transform_threshold_params(res.params)[1:-1]
    params = np.r_[cuts, res.params[:p]]
    # standard errors of the cut-points on our scale by the delta method: theta_j = a_1 + sum exp(a_2..a_j)
    J = np.zeros((m + p, m + p))
    a = res.params[p:]
    for j in range(m):
        J[j, p] = 1.0
        for i in range(1, j + 1):
            J[j, p + i] = math.exp(a[i])
    J[m:, :p] = np.eye(p)
    cov = J @ np.asarray(res.cov_params()) @ J.T
    probs = np.asarray(res.model.predict(res.params, exog=G))
    pred = probs[:, fit.favourable_mask_[fit.observed_]].sum(axis=1)
    return "ordinal", ref, params, np.sqrt(np.diag(cov)), pred, "", True


# ---- the command line ------------------------------------------------------------------------------
def table(check: ReferenceCheck) -> str:
    """The readable table `fulcrum analyse --check-reference` prints."""
    head = ["outcome", "index", "arm", "model", "coefficients", "std errors", "measure", "agrees"]
    rows = [[m.outcome, m.index, m.arm, m.model, _g(m.coefficients), _g(m.standard_errors), _g(m.predictions),
             ("yes" if m.checked else "not checked") if m.agrees else "NO"] for m in check.models]
    widths = [max(len(str(x)) for x in col) for col in zip(head, *rows)]
    out = ["Reference check: each per-arm model refitted with lifelines or statsmodels; the largest absolute "
           "differences (ours - reference).",
           "  ".join(h.ljust(w) for h, w in zip(head, widths)), "  ".join("-" * w for w in widths)]
    out += ["  ".join(str(c).ljust(w) for c, w in zip(r, widths)) for r in rows]
    refs = dict.fromkeys(f"{m.model}: {m.reference}" + (f" ({m.note})" if m.note else "") for m in check.models)
    out += ["", *refs]
    unchecked = [m for m in check.models if not m.checked and m.agrees]
    if check.agrees:
        out.append(f"Every {'checked ' if unchecked else ''}model agrees with its reference within {ABS_TOL:g} + "
                   f"{REL_TOL:g} x |reference|." + (f" {len(unchecked)} could not be checked (see above)."
                                                     if unchecked else ""))
    else:
        out.append("These models differ from their reference beyond the tolerance:")
        out += [f"  {m.outcome} along {m.index}, {m.arm} ({m.model}): {m.worst or m.note}" for m in check.disagreeing]
    return "\n".join(out)


def _g(v: float | None) -> str:
    return "-" if v is None else f"{v:.1e}"


# Which reference library refits which model (each model class has exactly one reference fitter).
REFITS = {CoxFit: _cox, WeibullFit: _weibull, LogisticFit: _logistic, LinearFit: _linear, OrdinalFit: _ordinal}
