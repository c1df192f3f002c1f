"""Weighting the chosen patients: standardised mean differences and the balance table, the propensity model and
stabilised inverse-probability weights. Below the fits, since the headline population (explorer.population) can
weight them; the randomised-versus-chosen checks (explorer.selection) use the same weights."""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .errors import FulcrumError

SMD_FLAG = 0.1  # Austin 2009: |SMD| above 0.1 signals imbalance
WEIGHT_NOTE = ("Weighting balances only the measured covariates ({covs}); differences in anything unmeasured "
               "between the patients who chose each option remain. The weighted analysis estimates the effect "
               "in the chosen patients (the target population).")


# ------------------------------------------------------------------------------------------
# Balance: standardised mean differences (Austin, Stat Med 2009; Austin & Stuart, Stat Med 2015)
# ------------------------------------------------------------------------------------------
def _wmean_var(x: np.ndarray, w: np.ndarray, binary: bool) -> tuple[float, float]:
    """Weighted mean and variance: p(1-p) for a 0/1 covariate, else sum(w)/(sum(w)^2 - sum(w^2)) sum w (x-m)^2."""
    sw = w.sum()
    m = float((w * x).sum() / sw)
    if binary:
        return m, m * (1.0 - m)
    denom = sw * sw - (w * w).sum()
    return m, float(sw / denom * (w * (x - m) ** 2).sum()) if denom > 0 else 0.0


def smd(x_first: np.ndarray, x_second: np.ndarray, w_first: np.ndarray | None = None,
        w_second: np.ndarray | None = None, binary: bool | None = None) -> float:
    """Standardised mean difference, first minus second, over the pooled SD sqrt((s1^2 + s2^2) / 2).

    A 0/1 covariate uses p(1-p) as its variance (Austin 2009); weights give weighted means and variances
    (Austin & Stuart 2015). Returns 0 when both variances are 0 and the means agree.
    """
    a, b = np.asarray(x_first, float), np.asarray(x_second, float)
    wa = np.ones(len(a)) if w_first is None else np.asarray(w_first, float)
    wb = np.ones(len(b)) if w_second is None else np.asarray(w_second, float)
    if binary is None:
        binary = bool(np.isin(np.concatenate([a, b]), (0.0, 1.0)).all())
    ma, va = _wmean_var(a, wa, binary)
    mb, vb = _wmean_var(b, wb, binary)
    sd = math.sqrt((va + vb) / 2.0)
    if sd == 0.0:
        return 0.0 if ma == mb else math.copysign(math.inf, ma - mb)
    return (ma - mb) / sd


def balance_table(X: pd.DataFrame, first: np.ndarray, weights: np.ndarray) -> list[dict]:
    """SMD of every design column before and after weighting, flagging |SMD| > 0.1 (Austin 2009)."""
    first = np.asarray(first, bool)
    w = np.asarray(weights, float)
    out = []
    for name in X.columns:
        v = X[name].to_numpy(float)
        before = smd(v[first], v[~first])
        after = smd(v[first], v[~first], w[first], w[~first])
        out.append({"covariate": str(name), "smd_before": rounded(before), "smd_after": rounded(after),
                    "flag_before": bool(abs(before) > SMD_FLAG), "flag_after": bool(abs(after) > SMD_FLAG)})
    return out


# ------------------------------------------------------------------------------------------
# Propensity and stabilised inverse-probability weights (target population: the chosen patients)
# ------------------------------------------------------------------------------------------
@dataclass
class Weighting:
    """A propensity model of receiving the first arm among chosen patients, and its truncated weights."""

    covariates: tuple[str, ...]
    columns: tuple[str, ...]
    intercept: float
    coef: np.ndarray
    score: np.ndarray
    weights: np.ndarray
    first: np.ndarray
    truncated_at: tuple[float, float]
    n_truncated: int
    balance: list[dict]
    warnings: list[str] = field(default_factory=list)

    def effective_n(self) -> dict[str, float]:
        """Kish's effective sample size per arm: (sum w)^2 / sum w^2."""
        out = {}
        for label, mask in (("first", self.first), ("second", ~self.first)):
            w = self.weights[mask]
            out[label] = float(w.sum() ** 2 / (w * w).sum()) if len(w) else 0.0
        return out

    def to_json(self, arms: tuple[str, str]) -> dict:
        ess = self.effective_n()
        return {"target": "chosen patients", "method": "stabilised inverse-probability weights from an "
                "unpenalised logistic propensity model of receiving " + arms[0],
                "covariates": list(self.covariates),
                "propensity": {"intercept": rounded(self.intercept),
                               "coefficients": {c: rounded(b) for c, b in zip(self.columns, self.coef)}},
                "truncated_at": [rounded(self.truncated_at[0]), rounded(self.truncated_at[1])],
                "n_truncated": int(self.n_truncated),
                "n": {arms[0]: int(self.first.sum()), arms[1]: int((~self.first).sum())},
                "effective_n": {arms[0]: rounded(ess["first"]), arms[1]: rounded(ess["second"])},
                "note": WEIGHT_NOTE.format(covs=", ".join(self.covariates))}


def covariate_design(frame: pd.DataFrame, covariates: tuple[str, ...] | list[str]) -> pd.DataFrame:
    """Numeric design columns: numbers and 0/1 flags as they are, text or categories as indicators
    (first level left out), so the propensity model and the balance table read the same columns."""
    parts = []
    for c in covariates:
        if c not in frame.columns:
            raise FulcrumError(f"the selection covariate '{c}' is not a column of the cohort.", column=c,
                               key="selection.covariates", hint="Name columns exactly as in the cohort file.")
        s = frame[c]
        if pd.api.types.is_bool_dtype(s) or pd.api.types.is_numeric_dtype(s):
            parts.append(s.astype(float).rename(c).to_frame())
        else:
            cat = s.astype("category")
            d = pd.get_dummies(cat, prefix=c, prefix_sep=" = ", drop_first=True, dtype=float)
            d.loc[s.isna(), :] = np.nan
            parts.append(d)
    return pd.concat(parts, axis=1) if parts else pd.DataFrame(index=frame.index)


def _logistic(X: np.ndarray, y: np.ndarray) -> tuple[float, np.ndarray]:
    """Unpenalised logistic regression by scikit-learn (penalty=None; C=inf from scikit-learn 1.8),
    fitted on standardised columns and mapped back so the coefficients are on the covariates' own scale."""
    import sklearn
    from sklearn.linear_model import LogisticRegression

    mu, sd = X.mean(axis=0), X.std(axis=0)
    sd[sd == 0] = 1.0
    Xs = (X - mu) / sd
    major, minor = (int(p) for p in sklearn.__version__.split(".")[:2])
    unpenalised = {"C": np.inf} if (major, minor) >= (1, 8) else {"penalty": None}
    m = LogisticRegression(solver="newton-cholesky", tol=1e-12, max_iter=1000, **unpenalised).fit(Xs, y)
    coef = m.coef_.reshape(-1) / sd
    return float(m.intercept_[0] - (coef * mu).sum()), coef


def propensity_weights(frame: pd.DataFrame, covariates: tuple[str, ...] | list[str], first: np.ndarray,
                       truncate: tuple[float, float] = (1.0, 99.0)) -> Weighting:
    """Propensity of the first arm from the covariates, stabilised weights P(arm) / P(arm | covariates)
    truncated at the given percentiles, and the balance table before and after weighting.

    `frame` holds only the chosen patients to weight, every covariate complete (the caller drops and counts).
    """
    X = covariate_design(frame, covariates)
    first = np.asarray(first, bool)
    bad = np.flatnonzero(X.isna().any(axis=1).to_numpy())
    if len(bad):
        raise FulcrumError("selection covariates have missing values in the rows to be weighted.",
                           rows=bad + 1, key="selection.covariates",
                           hint="Drop these patients from the weighted analysis or fill the covariates.")
    if first.all() or not first.any():
        raise FulcrumError("weighting needs chosen patients in both arms.", key="selection",
                           hint="Check the arm and allocation columns.")
    Xa = X.to_numpy(float)
    const = [c for c, v in zip(X.columns, Xa.T) if np.ptp(v) == 0] if len(Xa) else []
    if const:
        raise FulcrumError(f"the selection covariate column(s) {', '.join(const)} do not vary among the chosen "
                           "patients, so they cannot enter the propensity model.", key="selection.covariates",
                           hint="Remove them from [selection] covariates.")
    intercept, coef = _logistic(Xa, first.astype(int))
    score = 1.0 / (1.0 + np.exp(-(intercept + Xa @ coef)))
    share = first.mean()
    w = np.where(first, share / score, (1.0 - share) / (1.0 - score))
    lo, hi = np.percentile(w, truncate)
    n_trunc = int(((w < lo) | (w > hi)).sum())
    w = np.clip(w, lo, hi)
    warnings = []
    extreme = int(((score < 0.025) | (score > 0.975)).sum())
    if extreme:
        who = "1 chosen patient has" if extreme == 1 else f"{extreme} chosen patients have"
        warnings.append(f"{who} a propensity below 0.025 or above 0.975: the two arms barely overlap there, and "
                        "their weights rest on few comparable patients.")
    wt = Weighting(tuple(covariates), tuple(str(c) for c in X.columns), intercept, coef, score, w, first,
                   (float(lo), float(hi)), n_trunc, balance_table(X, first, w), warnings)
    still = [b["covariate"] for b in wt.balance if b["flag_after"]]
    if still:
        wt.warnings.append(f"After weighting, {', '.join(still)} still differ between arms (|SMD| > {SMD_FLAG}).")
    return wt


def rounded(v: float | None, digits: int = 6) -> float | None:
    if v is None or not np.isfinite(v):
        return None
    return float(round(float(v), digits))
