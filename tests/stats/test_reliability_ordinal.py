"""Ordinal alpha and omega (Zumbo, Gadermann & Zeisser 2007) from polychoric matrices.

Sources: the standardized alpha formula computed directly with numpy; pingouin 0.7 ``cronbach_alpha`` on
standardized data as the outside reference for that formula; reliability.mcdonald_omega for ordinal omega.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pingouin as pg
import pytest

from server.stats.correlation import polychoric_matrix
from server.stats.errors import InputError
from server.stats.reliability import mcdonald_omega, ordinal_alpha, ordinal_omega


def _ordinal_data(n=600, k=6, seed=11):
    rng = np.random.default_rng(seed)
    lam = np.linspace(.5, .8, k)
    z = rng.standard_normal((n, 1)) * lam + rng.standard_normal((n, k)) * np.sqrt(1 - lam ** 2)
    cuts = np.array([-1.0, 0.0, 0.7, 1.5])  # skewed 5-point items
    return pd.DataFrame(1 + np.searchsorted(cuts, z).astype(float), columns=[f"q{j + 1}" for j in range(k)])


def test_ordinal_alpha_is_standardized_alpha_of_the_polychoric_matrix():
    X = _ordinal_data()
    R = polychoric_matrix(X).matrix
    k = R.shape[0]
    res = ordinal_alpha(R)
    rbar = R[np.triu_indices(k, 1)].mean()
    assert res.alpha == pytest.approx(k * rbar / (1 + (k - 1) * rbar), abs=1e-12)  # standardized alpha formula
    assert res.alpha == pytest.approx(k / (k - 1) * (1 - k / R.sum()), abs=1e-12)  # alpha formula on R
    assert res.k == k and "latent" in res.note and res.warnings == ()


def test_standardized_alpha_formula_matches_pingouin():
    X = _ordinal_data(seed=3)
    Z = (X - X.mean()) / X.std(ddof=1)
    ref = pg.cronbach_alpha(Z)[0]  # pingouin 0.7: alpha of standardized items = standardized alpha
    assert ordinal_alpha(X.corr().to_numpy()).alpha == pytest.approx(ref, abs=1e-10)


def test_ordinal_omega_is_mcdonald_omega_of_the_polychoric_matrix():
    X = _ordinal_data(seed=5)
    R = polychoric_matrix(X).matrix
    res = ordinal_omega(R)
    assert res.omega == pytest.approx(mcdonald_omega(R).omega_total, abs=1e-14)
    assert len(res.loadings) == R.shape[0] and res.converged
    # the latent-response coefficients exceed the Pearson ones for coarse, skewed items
    assert res.omega > mcdonald_omega(X.corr().to_numpy()).omega_total


def test_ordinal_inputs_are_checked():
    with pytest.raises(InputError):
        ordinal_alpha(np.array([[2.0, .5], [.5, 1.0]]))
    with pytest.raises(InputError):
        ordinal_omega(np.eye(2))  # omega needs 3 items
    neg = ordinal_alpha(np.array([[1, -.3, -.3], [-.3, 1, -.3], [-.3, -.3, 1]]))
    assert neg.alpha < 0 and "negative" in neg.warnings[0].message  # reported, as reliability_from_cov does
