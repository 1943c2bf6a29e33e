"""Residual correlations of a factor model (efa.residual_correlations, efa.largest_residuals).

References: factor_analyzer 0.5.1's unrotated minres loadings on Holzinger & Swineford (1939) as shipped by
semopy (tests/reference/efa/README.md), and the rmsr our own EFA fit reports.
"""
from __future__ import annotations

import os
import warnings

import numpy as np
import pandas as pd
import pytest

from server.stats import efa
from server.stats.errors import InputError

HS_ITEMS = [f"x{i}" for i in range(1, 10)]


@pytest.fixture(scope="module")
def hs_R() -> np.ndarray:
    # Holzinger & Swineford (1939), 301 pupils, as shipped by semopy (tests/reference/efa/README.md)
    semopy = pytest.importorskip("semopy")
    path = os.path.join(os.path.dirname(semopy.__file__), "examples", "holzinger_swineford39_data.csv")
    df = pd.read_csv(path)[HS_ITEMS]
    assert df.shape == (301, 9)
    return np.corrcoef(df.to_numpy(dtype=float).T)


@pytest.fixture(scope="module")
def fa_unrotated(hs_R) -> np.ndarray:
    fa_mod = pytest.importorskip("factor_analyzer")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fa = fa_mod.FactorAnalyzer(n_factors=3, rotation=None, method="minres", is_corr_matrix=True)
        fa.fit(hs_R)
    return fa.loadings_


@pytest.mark.parametrize("rotation", ["oblimin", "promax", "varimax"])
def test_rotated_residuals_equal_those_of_factor_analyzers_unrotated_minres(hs_R, fa_unrotated, rotation):
    res = efa.factor_analysis(hs_R, 3, n=301, names=HS_ITEMS, method="minres", rotation=rotation)
    E = efa.residual_correlations(hs_R, res.pattern, res.phi)
    ref = hs_R - fa_unrotated @ fa_unrotated.T  # factor_analyzer 0.5.1 unrotated minres: R - LL'
    np.fill_diagonal(ref, 0.0)
    # rotation invariance: P Phi P' = A A'; the two minres optimisers agree to about 1e-6 here
    np.testing.assert_allclose(E, ref, atol=2e-6)
    assert np.all(np.diag(E) == 0.0)
    np.testing.assert_allclose(E, E.T, atol=1e-12)


@pytest.mark.parametrize("rotation", ["oblimin", "promax", "geomin", "none"])
def test_rms_of_the_residuals_is_the_rmsr_of_the_fit(hs_R, rotation):
    res = efa.factor_analysis(hs_R, 3, n=301, names=HS_ITEMS, method="minres", rotation=rotation)
    E = efa.residual_correlations(hs_R, res.pattern, res.phi)
    off = E[np.triu_indices(9, 1)]
    assert float(np.sqrt(np.mean(off ** 2))) == pytest.approx(res.fit["rmsr"], abs=1e-12)  # efa.fit_indices


def test_any_oblique_transformation_leaves_the_residuals_unchanged():
    rng = np.random.default_rng(12)
    A = rng.uniform(-0.8, 0.8, size=(7, 2))
    R = A @ A.T + np.diag(1 - np.sum(A ** 2, axis=1))
    R[0, 1] = R[1, 0] = R[0, 1] + 0.2  # a planted local dependence
    T = rng.normal(size=(2, 2)) + 2 * np.eye(2)
    P = A @ np.linalg.inv(T.T)  # pattern after the transformation T, factor correlations T'T
    np.testing.assert_allclose(efa.residual_correlations(R, P, T.T @ T), efa.residual_correlations(R, A), atol=1e-12)
    # by hand: only the planted pair is left over
    E = efa.residual_correlations(R, A)
    assert E[0, 1] == pytest.approx(0.2, abs=1e-12) and E[1, 0] == pytest.approx(0.2, abs=1e-12)
    assert np.abs(np.delete(E[0], [0, 1])).max() < 1e-12


def test_largest_residuals_are_listed_largest_first_above_the_threshold():
    names = ["a", "b", "c", "d"]
    E = np.zeros((4, 4))
    for (i, j), v in {(0, 1): 0.12, (2, 3): -0.25, (1, 2): 0.099, (0, 3): 0.10}.items():
        E[i, j] = E[j, i] = v
    R = np.full((4, 4), 0.3) + 0.7 * np.eye(4)
    out = efa.largest_residuals(E, names, R=R)
    assert [x["items"] for x in out] == [["c", "d"], ["a", "b"], ["a", "d"]]  # .099 stays out (default .10)
    assert out[0]["residual"] == -0.25 and out[0]["r"] == 0.3
    assert efa.RESIDUAL_THRESHOLD == 0.10
    assert [x["items"] for x in efa.largest_residuals(E, names, threshold=0.2)] == [["c", "d"]]
    assert efa.largest_residuals(E, names, threshold=0.2)[0]["r"] is None


def test_mismatched_shapes_are_refused_with_a_clear_message():
    R = np.eye(3)
    with pytest.raises(InputError, match="one row per item"):
        efa.residual_correlations(R, np.ones((4, 1)))
    with pytest.raises(InputError, match="2 x 2"):
        efa.residual_correlations(R, np.ones((3, 2)), np.eye(3))
    with pytest.raises(InputError, match="square"):
        efa.residual_correlations(np.ones((3, 2)), np.ones((3, 1)))
    with pytest.raises(InputError, match="do not match"):
        efa.largest_residuals(np.zeros((3, 3)), ["a", "b"])
