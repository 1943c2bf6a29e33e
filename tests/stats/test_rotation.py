"""Rotations against published examples (Harman 1976 via Bernaards & Jennrich) and reference libraries."""
from __future__ import annotations

import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from server.stats import rotation as rot
from server.stats.errors import InputError

with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    from statsmodels.multivariate.factor_rotation import rotate_factors
    from statsmodels.multivariate.factor_rotation.tests.test_rotation import TestGPARotation as _SM


def harman_unrotated() -> np.ndarray:
    # Harman (1976) 8 physical variables, unrotated 2-factor loadings, as in Bernaards & Jennrich's GPA
    # examples and statsmodels' test_rotation.py (read from the installed file, not retyped)
    return _SM.get_A()


def test_quartimin_matches_published_harman_solution():
    A, _table, L_required = _SM.get_quartimin_example()
    res = rot.oblimin(A, gamma=0)
    assert res.converged
    # Bernaards & Jennrich GPA quartimin example (statsmodels test_rotation.py L_required), 4 decimals
    np.testing.assert_allclose(res.pattern, L_required, atol=5e-5)
    # same file: table's last row criterion 0.00557 (5 decimals)
    assert round(res.criterion, 5) == 0.00557


def test_biquartimin_matches_published_harman_solution():
    A, _table, L_required = _SM.get_biquartimin_example()
    res = rot.oblimin(A, gamma=0.5)
    # statsmodels test_rotation.py biquartimin L_required (GPArotation example), 4 decimals
    np.testing.assert_allclose(res.pattern, L_required, atol=5e-5)


def test_quartimax_matches_published_harman_solution():
    A, _table, L_required = _SM.get_quartimax_example_derivative_free()
    res = rot.quartimax(A)
    assert res.converged
    # Bernaards & Jennrich GPA quartimax example (statsmodels test_rotation.py), 4 decimals
    np.testing.assert_allclose(res.pattern, L_required, atol=5e-5)
    # same table: criterion -1.02273
    assert round(res.criterion, 5) == -1.02273
    np.testing.assert_allclose(res.phi, np.eye(2), atol=1e-12)


def test_varimax_raw_matches_statsmodels_rotate_factors():
    A = harman_unrotated()
    L_sm, T_sm = rotate_factors(A, "varimax")  # statsmodels GPA varimax, no Kaiser normalisation
    res = rot.varimax(A, normalize=False)
    np.testing.assert_allclose(res.pattern, L_sm, atol=5e-5)  # statsmodels rotate_factors, 4 decimals
    np.testing.assert_allclose(res.T, T_sm, atol=5e-5)


def test_varimax_kaiser_and_promax_match_factor_analyzer():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        from factor_analyzer import Rotator
    A = harman_unrotated()
    vm = Rotator(method="varimax", tol=1e-12, max_iter=5000)
    L_vm = vm.fit_transform(A)
    np.testing.assert_allclose(rot.varimax(A).pattern, L_vm, atol=1e-4)  # factor_analyzer 0.5.1 varimax
    pm = Rotator(method="promax", tol=1e-12, max_iter=5000)
    L_pm = pm.fit_transform(A)
    ours = rot.promax(A)
    np.testing.assert_allclose(ours.pattern, L_pm, atol=1e-4)  # factor_analyzer 0.5.1 promax (power 4)
    np.testing.assert_allclose(ours.phi, pm.phi_, atol=1e-4)   # factor_analyzer 0.5.1 promax phi


@pytest.mark.parametrize("method", ["oblimin", "geomin", "promax", "varimax", "quartimax", "none"])
def test_pattern_phi_T_consistent(method):
    A = harman_unrotated()
    res = rot.rotate(A, method)
    Ti = np.linalg.inv(res.T)
    # convention of Bernaards & Jennrich (2005): pattern = A inv(T)', phi = T'T, structure = A T
    np.testing.assert_allclose(res.pattern, A @ Ti.T, atol=1e-8)
    np.testing.assert_allclose(res.phi, res.T.T @ res.T, atol=1e-8)
    np.testing.assert_allclose(res.structure, A @ res.T, atol=1e-8)
    np.testing.assert_allclose(res.structure, res.pattern @ res.phi, atol=1e-12)
    # communalities are rotation-invariant: diag(P phi P') = row sums of A²
    np.testing.assert_allclose(np.sum(res.pattern * res.structure, axis=1), np.sum(A * A, axis=1), atol=1e-8)
    np.testing.assert_allclose(np.diag(res.phi), 1.0, atol=1e-10)


@settings(max_examples=12, deadline=None)
@given(arrays(np.float64, (7, 3), elements=st.floats(-0.9, 0.9, allow_nan=False)))
def test_oblique_rotations_reproduce_the_common_part(A):
    # any rotation leaves the reproduced correlations A A' = P phi P' unchanged (identity, Harman 1976)
    if np.linalg.matrix_rank(A) < 3 or np.min(np.linalg.svd(A, compute_uv=False)) < 1e-2:
        return
    for res in (rot.oblimin(A, random_starts=2), rot.geomin(A, random_starts=2)):
        np.testing.assert_allclose(res.pattern @ res.phi @ res.pattern.T, A @ A.T, atol=1e-6)


def test_random_starts_keep_the_best_criterion_and_are_seeded():
    rng = np.random.default_rng(7)
    A = rng.uniform(-0.8, 0.8, size=(12, 3))
    one = rot.geomin(A, random_starts=1)
    many = rot.geomin(A, random_starts=8, seed=3)
    assert many.criterion <= one.criterion + 1e-9
    again = rot.geomin(A, random_starts=8, seed=3)
    np.testing.assert_array_equal(many.pattern, again.pattern)


def test_non_convergence_is_a_warning_not_an_exception():
    A = harman_unrotated()
    res = rot.oblimin(A, max_iter=2, random_starts=2)
    assert not res.converged
    assert any(w.code == "rotation_not_converged" and "did not converge" in w.message for w in res.warnings)


def test_one_factor_is_returned_unchanged():
    A = harman_unrotated()[:, :1]
    for method in ("oblimin", "geomin", "promax", "varimax"):
        res = rot.rotate(A, method)
        np.testing.assert_array_equal(res.pattern, A)
        assert res.phi.shape == (1, 1)


def test_bad_input_raises_input_error():
    with pytest.raises(InputError, match="Unknown rotation"):
        rot.rotate(harman_unrotated(), "equamaxx")
    bad = harman_unrotated().copy()
    bad[2, 1] = np.nan
    with pytest.raises(InputError, match="row 2"):
        rot.oblimin(bad)


@pytest.mark.parametrize("criterion", [
    lambda L: rot._vgq_oblimin(L, 0.0),
    lambda L: rot._vgq_oblimin(L, 0.5),
    lambda L: rot._vgq_geomin(L, 0.01),
    rot._vgq_quartimax,
])
def test_criterion_gradients_match_finite_differences(criterion):
    # analytic dQ/dL against forward differences from scipy.optimize.approx_fprime
    from scipy.optimize import approx_fprime
    L0 = np.random.default_rng(3).uniform(-0.8, 0.8, size=(6, 3))
    num = approx_fprime(L0.ravel(), lambda x: criterion(x.reshape(6, 3))[0], 1e-7)
    np.testing.assert_allclose(criterion(L0)[1].ravel(), num, atol=1e-5)  # scipy approx_fprime, 5 decimals


def test_kaiser_normalised_oblimin_keeps_the_convention():
    A = harman_unrotated()
    res = rot.oblimin(A, normalize=True)
    np.testing.assert_allclose(res.pattern, A @ np.linalg.inv(res.T).T, atol=1e-10)
    np.testing.assert_allclose(res.pattern @ res.phi @ res.pattern.T, A @ A.T, atol=1e-8)
