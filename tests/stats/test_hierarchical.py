"""Schmid-Leiman and the omega family (server/stats/hierarchical.py).

Sources: the closed-form values of a known higher-order model (Schmid & Leiman 1957: an independent-cluster
first-order structure under one second-order factor is reproduced exactly by the SL solution; omega_h,
omega_t and ECV as defined by McDonald 1999 and Zinbarg et al. 2005); Holzinger & Swineford (1939) nine
tests (semopy's copy) for identity checks only (no reference value quoted); reliability.mcdonald_omega for
the one-factor identity.
"""
from __future__ import annotations

import numpy as np
import pytest

from server.stats import efa
from server.stats.errors import InputError
from server.stats.hierarchical import (
    construct_replicability,
    omega_coefficients,
    schmid_leiman,
)
from server.stats.reliability import mcdonald_omega, one_factor_loadings

# A known higher-order model: 12 items, 3 group factors of 4 items, one second-order factor.
LAM = np.array([.70, .60, .50, .65, .55, .70, .60, .50, .60, .50, .70, .45])
GROUP = np.repeat([0, 1, 2], 4)
GAMMA = np.array([.80, .70, .60])


def _model():
    k = LAM.size
    L = np.zeros((k, 3))
    L[np.arange(k), GROUP] = LAM
    phi = np.outer(GAMMA, GAMMA)
    np.fill_diagonal(phi, 1.0)
    R = L @ phi @ L.T
    np.fill_diagonal(R, 1.0)
    return L, phi, R


def _closed_form(R):
    """The model's values in closed form: g = lambda gamma, f = lambda sqrt(1 - gamma^2)."""
    g = LAM * GAMMA[GROUP]
    f = LAM * np.sqrt(1 - GAMMA[GROUP] ** 2)
    V = R.sum()
    omega_h = g.sum() ** 2 / V
    omega_t = (g.sum() ** 2 + sum(f[GROUP == j].sum() ** 2 for j in range(3))) / V
    ecv = (g ** 2).sum() / (LAM ** 2).sum()
    return g, f, omega_h, omega_t, ecv


def _sl_of(R, m, **kw):
    res = efa.factor_analysis(R, m, method="minres", rotation="quartimin", **kw)
    return res, schmid_leiman(res.pattern, res.phi)


def _match_groups(sl):
    """Column of the SL group loadings that carries each true group (by the largest loading)."""
    return [int(np.argmax(np.abs(sl.group[GROUP == j]).sum(axis=0))) for j in range(3)]


def test_population_higher_order_model_is_recovered_exactly():
    _L, _phi, R = _model()
    _res, sl = _sl_of(R, 3)
    om = omega_coefficients(R, sl)
    g, f, omega_h, omega_t, ecv = _closed_form(R)
    # exact identities of the model (Schmid & Leiman 1957; McDonald 1999; Zinbarg et al. 2005)
    assert np.abs(sl.general - g).max() < 1e-6
    assert om.omega_hierarchical == pytest.approx(omega_h, abs=1e-6)
    assert om.omega_total == pytest.approx(omega_t, abs=1e-6)
    assert om.ecv == pytest.approx(ecv, abs=1e-6)
    cols = _match_groups(sl)
    assert sorted(cols) == [0, 1, 2]
    for j, c in enumerate(cols):
        assert np.abs(sl.group[GROUP == j, c] - f[GROUP == j]).max() < 1e-6
        assert np.abs(np.delete(sl.group[:, c], np.flatnonzero(GROUP == j))).max() < 1e-6
        # subscale omegas in closed form (Reise 2012; Rodriguez, Reise & Haviland 2016)
        sub = om.omega_subscale[c]
        idx = GROUP == j
        Vj = R[np.ix_(idx, idx)].sum()
        assert sub.omega_hs == pytest.approx(f[idx].sum() ** 2 / Vj, abs=1e-6)
        assert sub.omega_total == pytest.approx((g[idx].sum() ** 2 + f[idx].sum() ** 2) / Vj, abs=1e-6)
        assert sub.items == tuple(f"item {i + 1}" for i in np.flatnonzero(idx))
        # Hancock & Mueller (2001): H = 1 / (1 + 1 / sum l^2 / (1 - l^2))
        assert sub.h == pytest.approx(1 / (1 + 1 / np.sum(f[idx] ** 2 / (1 - f[idx] ** 2))), abs=1e-6)
    assert om.h_general == pytest.approx(1 / (1 + 1 / np.sum(g ** 2 / (1 - g ** 2))), abs=1e-6)
    assert sl.second_order_rmsr < 1e-6
    # the SL solution reproduces the population matrix
    implied = np.outer(sl.general, sl.general) + sl.group @ sl.group.T + np.diag(sl.uniquenesses)
    assert np.abs(implied - R).max() < 1e-6
    assert om.total_variance == pytest.approx(R.sum())
    assert om.warnings == ()


def test_large_sample_from_the_model_is_close():
    L, phi, R = _model()
    rng = np.random.default_rng(20240611)
    n = 20_000
    F = rng.multivariate_normal(np.zeros(3), phi, size=n)
    X = F @ L.T + rng.standard_normal((n, LAM.size)) * np.sqrt(1 - LAM ** 2)
    Rs = np.corrcoef(X, rowvar=False)
    _res, sl = _sl_of(Rs, 3)
    om = omega_coefficients(Rs, sl)
    g, _f, omega_h, omega_t, ecv = _closed_form(R)
    assert np.abs(sl.general - g).max() < 0.02  # sampling error at n = 20,000
    assert om.omega_hierarchical == pytest.approx(omega_h, abs=0.02)
    assert om.omega_total == pytest.approx(omega_t, abs=0.02)
    assert om.ecv == pytest.approx(ecv, abs=0.02)


def test_one_factor_omega_total_is_the_unidimensional_omega(holzinger):
    R = holzinger[["x1", "x2", "x3", "x4", "x5", "x6"]].corr().to_numpy()  # any matrix will do
    fit = one_factor_loadings(R)
    sl = schmid_leiman(fit.loadings, np.eye(1))
    om = omega_coefficients(R, sl)
    uni = mcdonald_omega(R).omega_total
    assert om.omega_total == pytest.approx(uni, abs=1e-12)  # identity with reliability.mcdonald_omega
    assert om.omega_hierarchical == pytest.approx(om.omega_total, abs=1e-15)
    assert om.ecv == pytest.approx(1.0)
    assert sl.group.shape == (6, 0) and om.omega_subscale == ()
    # the project's other minres (efa.extract) gives the same omega to its convergence tolerance
    ex = efa.extract(R, 1, method="minres")
    om2 = omega_coefficients(R, schmid_leiman(ex.loadings, np.eye(1)))
    assert om2.omega_total == pytest.approx(uni, abs=1e-5)


def test_holzinger_identities(holzinger):
    R = holzinger.corr().to_numpy()
    res, sl = _sl_of(R, 3, names=list(holzinger.columns))
    om = omega_coefficients(R, sl)
    # identities only: no published SL omega for these data is quoted here
    assert om.omega_total >= om.omega_hierarchical > 0
    assert 0 < om.ecv < 1
    assert 0 < om.h_general < 1
    np.testing.assert_allclose(sl.communalities, res.communalities, atol=1e-8)  # three factors: exact
    np.testing.assert_allclose(sl.general ** 2 + (sl.group ** 2).sum(axis=1) + sl.uniquenesses, 1.0)
    for sub in om.omega_subscale:
        assert 0 < sub.omega_hs <= sub.omega_total < 1
    assert sum(len(s.items) for s in om.omega_subscale) == 9
    # omega_total from the loadings equals 1 - sum(u)/1'R1 up to the residuals' sum (psych's form)
    resid = R - (np.outer(sl.general, sl.general) + sl.group @ sl.group.T + np.diag(sl.uniquenesses))
    assert om.omega_total == pytest.approx(1 - sl.uniquenesses.sum() / R.sum() - resid.sum() / R.sum(),
                                           abs=1e-10)


def test_factor_order_does_not_matter(holzinger):
    R = holzinger.corr().to_numpy()
    res, sl = _sl_of(R, 3)
    perm = [2, 0, 1]
    sl2 = schmid_leiman(res.pattern[:, perm], res.phi[np.ix_(perm, perm)])
    np.testing.assert_allclose(sl2.general, sl.general, atol=1e-7)
    np.testing.assert_allclose(sl2.group, sl.group[:, perm], atol=1e-7)
    a, b = omega_coefficients(R, sl), omega_coefficients(R, sl2)
    assert a.omega_hierarchical == pytest.approx(b.omega_hierarchical, abs=1e-10)
    assert a.omega_total == pytest.approx(b.omega_total, abs=1e-10)


def test_two_factors_use_sqrt_phi12_and_say_so():
    lam = np.array([.7, .6, .5, .6, .7, .5])
    L = np.zeros((6, 2))
    L[:3, 0], L[3:, 1] = lam[:3], lam[3:]
    phi = np.array([[1, .49], [.49, 1]])
    sl = schmid_leiman(L, phi)
    np.testing.assert_allclose(sl.general, lam * 0.7, atol=1e-12)  # sqrt(.49) = .7 for both factors
    np.testing.assert_allclose(sl.second_order, [0.7, 0.7])
    assert any("not identified" in w.message for w in sl.warnings)
    # a non-positive correlation leaves no general factor
    sl0 = schmid_leiman(L, np.array([[1, -.2], [-.2, 1]]))
    assert np.all(sl0.general == 0) and any("no general factor" in w.message for w in sl0.warnings)


def test_second_order_heywood_is_reported():
    L = np.kron(np.eye(3), np.full((3, 1), .6))
    phi = np.array([[1, .9, .9], [.9, 1, .5], [.9, .5, 1]])  # one-factor loading sqrt(.81/.5) > 1
    sl = schmid_leiman(L, phi)
    assert any(w.code in ("heywood", "second_order_heywood") and "Heywood" in w.message for w in sl.warnings)


def test_groups_option_and_errors():
    _L, _phi, R = _model()
    _res, sl = _sl_of(R, 3)
    cols = _match_groups(sl)
    groups = [cols[j] for j in GROUP]
    groups[0] = None  # leave item 1 out of every subscale
    om = omega_coefficients(R, sl, groups=groups)
    assert "item 1" not in om.omega_subscale[cols[0]].items
    with pytest.raises(InputError):
        omega_coefficients(R, sl, groups=[5] * 12)
    with pytest.raises(InputError):
        omega_coefficients(R[:5, :5], sl)
    with pytest.raises(InputError):
        schmid_leiman(np.ones((4, 2)), np.eye(3))
    with pytest.raises(InputError):
        schmid_leiman(np.ones((4, 2)), np.array([[1, 1.5], [1.5, 1]]))


def test_construct_replicability():
    # Hancock & Mueller (2001): one item loading .8 -> H = .64 (the item's own reliability)
    assert construct_replicability([.8]) == pytest.approx(.64)
    assert construct_replicability([1.0, .5]) is None
    assert construct_replicability([0.0, 0.0]) is None
