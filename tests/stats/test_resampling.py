"""Bootstrap intervals against scipy.stats.bootstrap, and factor alignment."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from server.stats import resampling
from server.stats.errors import InputError


def test_bootstrap_indices_are_reproducible_and_in_range():
    a = resampling.bootstrap_indices(50, 30, seed=4)
    assert a.shape == (30, 50) and a.min() >= 0 and a.max() < 50
    assert np.array_equal(a, resampling.bootstrap_indices(50, 30, seed=4))
    assert not np.array_equal(a, resampling.bootstrap_indices(50, 30, seed=5))
    with pytest.raises(InputError):
        resampling.bootstrap_indices(0, 10, seed=1)


@pytest.fixture(scope="module")
def skewed() -> np.ndarray:
    return np.random.default_rng(0).lognormal(size=40)


@pytest.mark.parametrize("statistic", [np.std, np.mean])
@pytest.mark.parametrize("level", [0.95, 0.90])
def test_intervals_match_scipy_bootstrap(skewed, statistic, level):
    x = skewed
    B, seed = 2000, 12
    idx = resampling.bootstrap_indices(len(x), B, seed=seed)
    values = statistic(x[idx], axis=-1)
    jack = np.array([statistic(np.delete(x, i)) for i in range(len(x))])
    ours_p = resampling.percentile_interval(values, level=level)
    ours_b = resampling.bca_interval(values, statistic(x), jack, level=level)
    for method, ours in (("percentile", ours_p), ("BCa", ours_b)):
        ref = stats.bootstrap((x,), statistic, n_resamples=B, confidence_level=level, method=method,
                              rng=np.random.default_rng(seed), vectorized=True)
        # scipy.stats.bootstrap draws the same resamples from the same generator; equal to rounding
        assert np.array_equal(np.sort(ref.bootstrap_distribution), np.sort(values))  # scipy 1.17
        assert ours.low == pytest.approx(ref.confidence_interval.low, rel=1e-12)  # scipy.stats.bootstrap
        assert ours.high == pytest.approx(ref.confidence_interval.high, rel=1e-12)  # scipy.stats.bootstrap
    assert ours_b.reason is None and ours_b.acceleration is not None


def test_bca_undefined_cases_say_why():
    v = np.linspace(1, 2, 100)
    one_side = resampling.bca_interval(v, 0.5, np.linspace(0, 1, 10))
    assert one_side.low is None and "one side" in one_side.reason
    flat = resampling.bca_interval(v, 1.5, np.ones(10))
    assert flat.low is None and "do not vary" in flat.reason
    nan_jack = resampling.bca_interval(v, 1.5, [1.0, np.nan, 2.0])
    assert nan_jack.low is None and nan_jack.reason
    few = resampling.percentile_interval([1.0, np.nan])
    assert few.low is None and few.n_dropped == 1


def test_percentile_drops_undefined_resamples():
    v = np.r_[np.arange(101.0), np.nan, np.inf]
    res = resampling.percentile_interval(v, level=0.9)
    assert (res.n_resamples, res.n_dropped) == (101, 2)
    assert (res.low, res.high) == pytest.approx((5.0, 95.0), abs=1e-12)  # quantiles .05, .95 of 0..100
    with pytest.raises(InputError):
        resampling.percentile_interval(v, level=95)


def test_alignment_recovers_permuted_reflected_loadings():
    rng = np.random.default_rng(2)
    ref = np.zeros((12, 4))
    for k in range(4):
        ref[3 * k: 3 * k + 3, k] = rng.uniform(0.5, 0.8, 3)
    ref += rng.uniform(-0.1, 0.1, ref.shape)
    phi = np.array([[1, .3, .2, .1], [.3, 1, .4, .2], [.2, .4, 1, .3], [.1, .2, .3, 1]])
    perm, signs = [2, 0, 3, 1], np.array([1.0, -1.0, -1.0, 1.0])
    noisy = ref + rng.normal(0, 0.02, ref.shape)
    shuffled = noisy[:, perm] * signs
    phi_sh = phi[np.ix_(perm, perm)] * np.outer(signs, signs)
    al = resampling.align_factors(shuffled, ref, phi=phi_sh)
    np.testing.assert_allclose(al.loadings, noisy, atol=1e-12)
    np.testing.assert_allclose(al.phi, phi, atol=1e-12)
    assert al.order == tuple(perm.index(j) for j in range(4))
    assert al.signs == tuple(signs[perm.index(j)] for j in range(4))
    assert min(al.congruence) > 0.95 and al.unmatched == () and al.unmatched_reference == ()


def test_alignment_with_fewer_resample_factors_marks_the_unmatched():
    ref = np.kron(np.eye(3), np.ones((3, 1))) * 0.7
    al = resampling.align_factors(-ref[:, [2, 0]], ref)
    assert al.order == (1, None, 0) and al.unmatched_reference == (1,)
    assert np.all(np.isnan(al.loadings[:, 1]))
    np.testing.assert_allclose(al.loadings[:, [0, 2]], ref[:, [0, 2]])
    with pytest.raises(InputError):
        resampling.align_factors(ref[:5], ref)
