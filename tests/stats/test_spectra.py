"""server.stats.spectra against numpy.linalg (the reference library): the same numbers from scipy's LAPACK."""
from __future__ import annotations

import numpy as np
import pytest

from server.stats import spectra


def _spd(k: int, seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((3 * k, k)) @ rng.standard_normal((k, k)) * 0.3 + rng.standard_normal((3 * k, k))
    return np.corrcoef(X, rowvar=False)


@pytest.mark.parametrize("k", [5, 40, 120])  # numpy's path below spectra._SMALL, scipy's above
def test_matrix_functions_equal_numpy_linalg(k):
    R = _spd(k)
    np.testing.assert_allclose(spectra.eigvalsh(R), np.linalg.eigvalsh(R), rtol=0, atol=1e-12)
    np.testing.assert_allclose(spectra.inv(R), np.linalg.inv(R), rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(spectra.cholesky(R), np.linalg.cholesky(R), rtol=1e-12, atol=1e-13)
    sign, logdet = spectra.slogdet(R)
    ref_sign, ref_logdet = np.linalg.slogdet(R)
    assert sign == ref_sign
    assert logdet == pytest.approx(float(ref_logdet), rel=1e-12, abs=1e-12)


def test_slogdet_sign_of_an_indefinite_matrix_and_a_singular_one():
    rng = np.random.default_rng(3)
    for k in (20, 21):  # odd and even numbers of row swaps and negative pivots
        A = rng.standard_normal((k, k))
        sign, logdet = spectra.slogdet(A)
        ref_sign, ref_logdet = np.linalg.slogdet(A)
        assert sign == ref_sign
        assert logdet == pytest.approx(float(ref_logdet), rel=1e-12)
    S = _spd(30)
    S[4, :] = 0.0  # a zero row: exactly singular
    assert spectra.slogdet(S) == (0.0, float("-inf"))
    assert tuple(map(float, np.linalg.slogdet(S))) == (0.0, float("-inf"))


def test_cholesky_refuses_a_matrix_that_is_not_positive_definite():
    R = _spd(30)
    R[0, 1] = R[1, 0] = 5.0
    with pytest.raises(np.linalg.LinAlgError):
        spectra.cholesky(R)
    with pytest.raises(np.linalg.LinAlgError):
        np.linalg.cholesky(R)
