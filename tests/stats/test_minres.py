"""Minres by Newton's method (server/stats/minres.py) against scipy's general-purpose optimiser.

References: scipy.optimize (L-BFGS-B on the same criterion, and finite differences of the gradient for the
Hessian); Holzinger & Swineford (1939) as semopy ships them (the ``holzinger`` fixture); factor_analyzer's
unrotated minres for the loadings (tests/stats/test_efa.py and test_crosschecks.py go through this solver).
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize

from server.stats import efa, reliability
from server.stats.minres import _hessian, minres_newton

LOWER = 0.005


def _f(psi, R, m):
    S = R.copy()
    np.fill_diagonal(S, 1.0 - psi)
    lam = np.linalg.eigvalsh(S)[::-1]
    return float(np.sum(lam[m:] ** 2))


def _lbfgsb(R, m, psi0):
    """The criterion minimised by scipy's L-BFGS-B from the same start, gradient by finite differences."""
    res = optimize.minimize(_f, psi0, args=(R, m), method="L-BFGS-B", bounds=[(LOWER, 1.0)] * len(psi0),
                            options={"ftol": 1e-15, "gtol": 1e-12, "maxiter": 5000})
    return res.x, float(res.fun)


def _pool(k=24, m=3, n=3000, seed=5):
    rng = np.random.default_rng(seed)
    L = np.zeros((k, m))
    for j in range(k):
        L[j, j % m] = rng.uniform(0.45, 0.8)
        L[j, (j + 1) % m] = rng.uniform(-0.1, 0.2)
    X = rng.standard_normal((n, m)) @ L.T + rng.standard_normal((n, k)) * np.sqrt(1 - (L ** 2).sum(axis=1))
    return np.corrcoef(X, rowvar=False)


@pytest.mark.parametrize("m", [1, 2, 3])
def test_newton_reaches_scipys_minimum_on_holzinger_swineford(holzinger, m):
    R = holzinger.corr().to_numpy()
    psi0 = np.clip(1 - efa._smc(R), LOWER, 1)
    out = minres_newton(R, m, psi0)
    assert out is not None
    psi, f, steps = out
    ref_psi, ref_f = _lbfgsb(R, m, psi0)  # scipy.optimize L-BFGS-B
    assert f <= ref_f + 1e-12
    np.testing.assert_allclose(psi, ref_psi, atol=1e-5)
    assert f == pytest.approx(_f(psi, R, m), abs=1e-14)
    assert steps <= 10


def test_newton_converges_in_few_steps_from_a_warm_start():
    R = _pool()
    full = efa.extract(R, 3)
    rng = np.random.default_rng(1)
    X = rng.multivariate_normal(np.zeros(24), R, size=3000)
    Rb = np.corrcoef(X, rowvar=False)  # data like the first: the first's uniquenesses are a warm start
    out = minres_newton(Rb, 3, full.uniquenesses)
    assert out is not None and out[2] <= 4
    ref_psi, ref_f = _lbfgsb(Rb, 3, full.uniquenesses)
    assert out[1] <= ref_f + 1e-12
    np.testing.assert_allclose(out[0], ref_psi, atol=1e-5)


def test_the_hessian_is_the_derivative_of_the_gradient():
    """The closed-form Hessian against central differences of the analytic gradient (numerical derivative)."""
    R = _pool(k=10, m=2, seed=8)
    psi = efa.extract(R, 2).uniquenesses + 0.02

    def eig(p):
        S = R.copy()
        np.fill_diagonal(S, 1.0 - p)
        lam, U = np.linalg.eigh(S)
        return lam[::-1], U[:, ::-1]

    def grad(p):
        lam, U = eig(p)
        return -2.0 * ((U[:, 2:] ** 2) @ lam[2:])

    h = 1e-6
    H_num = np.array([(grad(psi + h * e) - grad(psi - h * e)) / (2 * h) for e in np.eye(10)]).T
    H = _hessian(*eig(psi), 2)
    np.testing.assert_allclose(H, H_num, atol=1e-5)
    np.testing.assert_allclose(grad(psi), optimize.approx_fprime(psi, _f, 1e-7, R, 2), atol=1e-5)  # scipy


def test_heywood_case_is_held_at_the_bound_as_scipy_holds_it():
    # one factor, three items: lambda_1^2 = .64/.5 = 1.28 > 1 (Harman 1976's improper solution)
    R = np.array([[1.0, 0.8, 0.8], [0.8, 1.0, 0.5], [0.8, 0.5, 1.0]])
    psi0 = np.clip(1 - efa._smc(R), LOWER, 1)
    out = minres_newton(R, 1, psi0)
    assert out is not None
    psi, f, _ = out
    assert psi[0] == LOWER
    ref_psi, ref_f = _lbfgsb(R, 1, psi0)
    assert f <= ref_f + 1e-12
    np.testing.assert_allclose(psi, ref_psi, atol=1e-5)
    ex = efa.extract(R, 1, names=["a", "b", "c"])
    assert ex.heywood == [0] and any(w.code == "heywood" for w in ex.warnings)


def test_declines_without_a_separated_mth_eigenvalue_and_the_callers_fall_back():
    R = np.eye(6)  # every eigenvalue of R - diag(psi) is the same: no leading factor to separate
    assert minres_newton(R, 2, np.full(6, 0.5)) is None
    ex = efa.extract(R, 2)  # L-BFGS-B takes over
    assert np.all(np.isfinite(ex.loadings))


def test_one_factor_loadings_use_newton_and_match_the_fixed_point_solution(holzinger):
    R = holzinger.corr().to_numpy()
    fit = reliability.one_factor_loadings(R)
    assert fit.method == "newton" and fit.converged
    L, conv, _ = reliability._fit_batch(reliability._off_diagonal(R), reliability._pc_start(R)[None, :],
                                        np.ones((1, 9), dtype=bool), tol=1e-13, max_iter=100_000)
    ref = L[0] * np.sign(L[0].sum())
    assert conv[0]
    np.testing.assert_allclose(fit.loadings, ref, atol=1e-7)  # the previous solver, run to a tight tolerance
