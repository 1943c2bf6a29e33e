"""Extraction, fit indices and the whole EFA against Holzinger & Swineford (1939) and simulated structures."""
from __future__ import annotations

import json
import os
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats

from server.stats import efa
from server.stats.errors import InputError

with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    from factor_analyzer import FactorAnalyzer, Rotator

HS_ITEMS = [f"x{i}" for i in range(1, 10)]
HS_CONSTRUCTS = ["visual"] * 3 + ["textual"] * 3 + ["speed"] * 3


@pytest.fixture(scope="module")
def hs_R() -> np.ndarray:
    # Holzinger & Swineford (1939), 301 pupils, as shipped by semopy (tests/reference/efa/README.md)
    import semopy
    path = os.path.join(os.path.dirname(semopy.__file__), "examples", "holzinger_swineford39_data.csv")
    df = pd.read_csv(path)[HS_ITEMS]
    assert df.shape == (301, 9)  # semopy's holzinger_swineford39_data.csv: 301 pupils
    return np.corrcoef(df.to_numpy(dtype=float).T)


def fa_fit(R, method, rotation=None, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fa = FactorAnalyzer(n_factors=3, rotation=rotation, method=method, is_corr_matrix=True, **kw)
        fa.fit(R)
    return fa


def line_up(ours: np.ndarray, ref: np.ndarray) -> np.ndarray:
    """Reorder and reflect the columns of ``ref`` to match ``ours`` (Tucker's congruence, Hungarian)."""
    C = efa.congruence(ours, ref)
    r, c = optimize.linear_sum_assignment(-np.abs(C))
    out = np.empty_like(ours)
    for i, j in zip(r, c):
        out[:, i] = ref[:, j] * np.sign(C[i, j])
    return out


# ----------------------------------------------------------------------------- Holzinger-Swineford

@pytest.mark.parametrize("method", ["minres", "ml"])
def test_unrotated_loadings_and_uniquenesses_match_factor_analyzer(hs_R, method):
    ex = efa.extract(hs_R, 3, method=method)
    fa = fa_fit(hs_R, method)
    assert ex.converged and ex.heywood == []
    # factor_analyzer 0.5.1 unrotated minres/ML loadings (numerical-gradient optimiser), 3 decimals
    np.testing.assert_allclose(ex.loadings, line_up(ex.loadings, fa.loadings_), atol=5e-4)
    # factor_analyzer 0.5.1 get_uniquenesses(), 3 decimals
    np.testing.assert_allclose(ex.uniquenesses, fa.get_uniquenesses(), atol=5e-4)
    np.testing.assert_allclose(ex.communalities + ex.uniquenesses, 1.0, atol=1e-12)


def test_ml_fit_indices(hs_R):
    ex = efa.extract(hs_R, 3, method="ml")
    fit = efa.fit_indices(hs_R, ex.loadings, ex.uniquenesses, 301, "ml")
    fa = fa_fit(hs_R, "ml")
    chi2_ref, df_ref, p_ref = fa.sufficiency(301)
    assert round(fit["chi2"], 2) == round(float(chi2_ref), 2)  # factor_analyzer sufficiency (Bartlett)
    assert fit["df"] == df_ref == 12  # factor_analyzer sufficiency: 12 df
    assert round(fit["p"], 4) == round(float(p_ref), 4)  # factor_analyzer sufficiency p
    assert round(fit["chi2"], 2) == 22.38  # R factanal on these data: "22.38 on 12 degrees of freedom", from memory
    assert "Bartlett" in fit["chi2_correction"]
    # the extraction's criterion at its minimum is the ML discrepancy behind that chi-square
    assert (301 - 1 - 23 / 6 - 2) * ex.objective == pytest.approx(float(chi2_ref), rel=1e-6)
    # RMSEA interval: the bounds are the noncentralities where the noncentral chi-square CDF at the
    # observed chi2 is .95 and .05 (Steiger 1990), checked with scipy.stats.ncx2
    dfn, n = fit["df"], 301
    lo, hi = (v ** 2 * dfn * (n - 1) for v in fit["rmsea_ci"])
    assert stats.ncx2.cdf(fit["chi2"], dfn, hi) == pytest.approx(0.05, abs=1e-6)  # scipy ncx2
    assert stats.ncx2.cdf(fit["chi2"], dfn, lo) == pytest.approx(0.95, abs=1e-6)  # scipy ncx2
    assert fit["rmsea_ci"][0] < fit["rmsea"] < fit["rmsea_ci"][1]
    # TLI and BIC from their definitions with the independence model (Tucker & Lewis 1973)
    k = 9
    chi0 = (n - 1 - (2 * k + 5) / 6) * -np.linalg.slogdet(hs_R)[1]
    df0 = k * (k - 1) / 2
    assert fit["tli"] == pytest.approx((chi0 / df0 - fit["chi2"] / dfn) / (chi0 / df0 - 1), rel=1e-12)
    assert fit["bic"] == pytest.approx(fit["chi2"] - dfn * np.log(n), rel=1e-12)
    assert 0 < fit["rmsr"] < 0.05


def test_ml_quartimin_matches_factor_analyzer_and_flags_x9(hs_R):
    res = efa.factor_analysis(hs_R, 3, n=301, names=HS_ITEMS, method="ml", rotation="oblimin",
                              constructs=HS_CONSTRUCTS)
    fa = fa_fit(hs_R, "ml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rq = Rotator(method="quartimin", tol=1e-10, max_iter=5000)
        L_ref = rq.fit_transform(fa.loadings_)
    # factor_analyzer 0.5.1 ML + quartimin (Rotator on its own unrotated loadings), 3 decimals
    np.testing.assert_allclose(res.pattern, line_up(res.pattern, L_ref), atol=5e-4)
    # factor_analyzer 0.5.1 uniquenesses (rotation-invariant), 3 decimals
    np.testing.assert_allclose(res.uniquenesses, fa.get_uniquenesses(), atol=5e-4)
    assert set(res.factors) == {"visual", "textual", "speed"}
    flagged = {(f["item"], f["kind"]) for f in res.flags}
    # issue 3 check: x9 (straight-curved capitals) shows up as a cross-loader, speed .46 / visual .37 here;
    # its visual-speed cross-loading is the textbook example of these data (from memory)
    assert ("x9", "cross_loading") in flagged
    assert not any(kind == "cross_loading" for item, kind in flagged if item != "x9")
    d = json.loads(json.dumps(res.to_dict(), allow_nan=False))
    assert d["n_factors"] == 3 and len(d["loadings"]["x9"]) == 3
    np.testing.assert_allclose(np.array(d["structure"]["x1"]),
                               np.array(d["loadings"]["x1"]) @ np.array(d["factor_correlations"]), atol=1e-12)
    assert d["rotation"] == "oblimin" and d["method"] == "ml" and "match" in d


@pytest.mark.parametrize("rotation", ["varimax", "promax"])
def test_varimax_and_promax_match_factor_analyzer(hs_R, rotation):
    res = efa.factor_analysis(hs_R, 3, n=301, names=HS_ITEMS, method="minres", rotation=rotation)
    fa = fa_fit(hs_R, "minres")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rr = Rotator(method=rotation, tol=1e-12, max_iter=5000)
        L_ref = rr.fit_transform(fa.loadings_)
    # factor_analyzer 0.5.1 Rotator varimax / promax (Kaiser-normalised, power 4), 3 decimals
    np.testing.assert_allclose(res.pattern, line_up(res.pattern, L_ref), atol=5e-4)
    if rotation == "promax":
        C = efa.congruence(res.pattern, L_ref)
        r, c = optimize.linear_sum_assignment(-np.abs(C))
        s = np.sign(C[r, c])
        phi_ref = rr.phi_[np.ix_(c, c)] * np.outer(s, s)
        np.testing.assert_allclose(res.phi, phi_ref, atol=5e-4)  # factor_analyzer Rotator phi_, 3 decimals


def test_communalities_identical_across_rotations(hs_R):
    base = None
    for rotation in ("none", "varimax", "quartimax", "oblimin", "geomin", "promax"):
        res = efa.factor_analysis(hs_R, 3, n=301, names=HS_ITEMS, method="minres", rotation=rotation)
        if base is None:
            base = res.communalities
        np.testing.assert_array_equal(res.communalities, base)
        # Harman (1976): h² = diag(P phi P') for any rotation
        np.testing.assert_allclose(np.sum(res.pattern * res.structure, axis=1), base, atol=1e-7)
        np.testing.assert_allclose(res.structure, res.pattern @ res.phi, atol=1e-12)
        assert sum(res.variance["ss_loadings"]) == pytest.approx(base.sum(), abs=1e-7)


def test_paf_agrees_with_minres_on_hs(hs_R):
    # iterated principal axes and minres minimise the same least-squares criterion at convergence
    # (Harman 1976, ch. 8-9), so their communalities coincide
    paf = efa.extract(hs_R, 3, method="paf", tol=1e-10, max_iter=5000)
    mr = efa.extract(hs_R, 3, method="minres")
    assert paf.converged
    np.testing.assert_allclose(paf.communalities, mr.communalities, atol=1e-3)


# ----------------------------------------------------------------------------- factor identity

def test_factor_identity_kept_after_dropping_an_item(hs_R):
    first = efa.factor_analysis(hs_R, 3, n=301, names=HS_ITEMS, method="minres", constructs=HS_CONSTRUCTS)
    # present the first solution with shuffled and reflected columns, as if it had been ordered that way
    perm, signs = [2, 0, 1], np.array([1.0, -1.0, 1.0])
    prev = first.to_dict()
    prev["loadings"] = {k: [v[p] * s for p, s in zip(perm, signs)] for k, v in prev["loadings"].items()}
    prev["factors"] = [first.factors[p] for p in perm]
    keep = [i for i in range(9) if i != 0]  # drop x1
    second = efa.factor_analysis(hs_R[np.ix_(keep, keep)], 3, n=301, names=[HS_ITEMS[i] for i in keep],
                                 method="minres", constructs=[HS_CONSTRUCTS[i] for i in keep], previous=prev)
    old = np.array([prev["loadings"][HS_ITEMS[i]] for i in keep])
    C = efa.congruence(second.pattern, old)
    assert np.all(np.diag(C) > 0.95)  # same column order and sign as the previous solution
    assert "congruence" in second.match
    assert second.factors == prev["factors"]  # labels travel with their factors
    # without 'previous' the order is by variance and the first factor's loadings sum positive
    plain = efa.factor_analysis(hs_R[np.ix_(keep, keep)], 3, n=301, names=[HS_ITEMS[i] for i in keep])
    v = plain.variance["ss_loadings"]
    assert v == sorted(v, reverse=True)
    assert np.all(plain.pattern.sum(axis=0) > 0)


# ----------------------------------------------------------------------------- simulated structure

def simulate(n=4000, seed=11, raw=False):
    """Two factors (r .3): A1-A6 on F1, B1-B6 on F2; A6 cross-loads; B6 is coded B but measures F1;
    A5 is reverse-worded (negative loading) and not declared reverse."""
    rng = np.random.default_rng(seed)
    names = [f"A{i}" for i in range(1, 7)] + [f"B{i}" for i in range(1, 7)]
    constructs = ["A"] * 6 + ["B"] * 6
    L = np.zeros((12, 2))
    L[:6, 0] = [0.75, 0.7, 0.65, 0.7, -0.6, 0.5]
    L[5, 1] = 0.45           # A6 cross-loads
    L[6:11, 1] = [0.75, 0.7, 0.65, 0.7, 0.6]
    L[11, 0] = 0.7           # B6 misplaced on F1
    phi = np.array([[1.0, 0.3], [0.3, 1.0]])
    F = rng.multivariate_normal([0, 0], phi, size=n)
    u = np.sqrt(1 - np.sum((L @ phi) * L, axis=1))
    X = F @ L.T + rng.standard_normal((n, 12)) * u
    if raw:
        return X, names, constructs, L, phi
    return np.corrcoef(X.T), names, constructs, L, phi


def test_simulated_structure_is_recovered_and_flagged():
    R, names, constructs, L, _phi = simulate()
    res = efa.factor_analysis(R, 2, n=4000, names=names, constructs=constructs, method="minres",
                              rotation="oblimin")
    assert res.factors == ["A", "B"]
    # known generating loadings recovered (sampling error at n 4000 is about .02)
    np.testing.assert_allclose(res.pattern, L, atol=0.06)
    # the factor correlation is recovered more loosely: quartimin trades some of it for simpler loadings
    # when items are complex (Browne 2001), here .37 against the generating .30
    assert res.phi[0, 1] == pytest.approx(0.3, abs=0.1)
    kinds = {(f["item"], f["kind"]) for f in res.flags}
    assert ("A6", "cross_loading") in kinds
    assert ("B6", "misplaced") in kinds
    assert ("A5", "reverse_suspect") in kinds
    flagged_items = {item for item, _ in kinds}
    assert flagged_items == {"A5", "A6", "B6"}
    # declaring A5 reverse removes the reverse flag
    res2 = efa.factor_analysis(R, 2, n=4000, names=names, constructs=constructs,
                               reverse=[n == "A5" for n in names])
    assert ("A5", "reverse_suspect") not in {(f["item"], f["kind"]) for f in res2.flags}


def test_simulated_structure_from_polychoric_correlations():
    from server.stats.correlation import polychoric_matrix
    X, names, constructs, L, _phi = simulate(n=3000, seed=5, raw=True)
    # five ordered categories with uneven thresholds: the polychoric matrix estimates the latent
    # correlations (Olsson 1979), so the generating loadings are recovered as with continuous data
    cuts = np.array([-1.5, -0.5, 0.3, 1.2])
    Y = np.searchsorted(cuts, X).astype(float) + 1
    pc = polychoric_matrix(Y, names=names)
    res = efa.factor_analysis(pc.matrix, 2, n=3000, names=names, constructs=constructs)
    assert res.factors == ["A", "B"]
    np.testing.assert_allclose(res.pattern, L, atol=0.08)
    kinds = {(f["item"], f["kind"]) for f in res.flags}
    assert {("A6", "cross_loading"), ("B6", "misplaced"), ("A5", "reverse_suspect")} <= kinds
    assert {item for item, _ in kinds} == {"A5", "A6", "B6"}


# ----------------------------------------------------------------------------- boundaries

def heywood_R():
    # one factor, three items: lambda_1² = r12 r13 / r23 = .64/.5 = 1.28 > 1 (Harman 1976's classic
    # improper one-factor solution); R is positive definite (det .11)
    return np.array([[1.0, 0.8, 0.8], [0.8, 1.0, 0.5], [0.8, 0.5, 1.0]])


@pytest.mark.parametrize("method", ["minres", "ml", "paf"])
def test_heywood_case_is_reported_not_hidden(method):
    ex = efa.extract(heywood_R(), 1, method=method, names=["a", "b", "c"], max_iter=200)
    assert ex.heywood == [0]
    assert any(w.code == "heywood" and w.items == ("a",) and "'a' is a Heywood case" in w.message
               for w in ex.warnings)
    if method == "paf":
        assert ex.communalities[0] > 1.0  # not clipped: PAF communality above 1
    else:
        assert ex.communalities[0] >= 0.99
    res = efa.factor_analysis(heywood_R(), 1, n=200, names=["a", "b", "c"], method=method)
    assert ("a", "heywood") in {(f["item"], f["kind"]) for f in res.flags}
    d = json.loads(json.dumps(res.to_dict(), allow_nan=False))  # strict JSON, as the API sends it
    assert d["heywood"] == ["a"]


def test_duplicated_item_gives_a_clear_message():
    R, names, _constructs, _, _ = simulate(n=800)
    R2 = np.zeros((13, 13))
    idx = list(range(12)) + [0]
    R2[:] = R[np.ix_(idx, idx)]
    names2 = names + ["A1_copy"]
    res = efa.factor_analysis(R2, 2, n=800, names=names2, method="minres")
    assert any("'A1' and 'A1_copy' correlate 1.0000" in w.message for w in res.warnings)
    with pytest.raises(InputError, match="positive definite") as e:
        efa.factor_analysis(R2, 2, n=800, names=names2, method="ml")
    assert e.value.code == "singular_matrix"


def test_bad_input():
    R = heywood_R()
    with pytest.raises(InputError, match="from 1 to 2"):
        efa.extract(R, 3)
    with pytest.raises(InputError, match="Unknown extraction"):
        efa.extract(R, 1, method="pca")
    bad = R.copy()
    bad[0, 1] = bad[1, 0] = np.nan
    with pytest.raises(InputError, match="'a' and 'b' is missing"):
        efa.extract(bad, 1, names=["a", "b", "c"])
    with pytest.raises(InputError, match="not symmetric"):
        efa.extract(R + np.triu(np.full((3, 3), 0.01), 1), 1)
    with pytest.raises(InputError, match="Unknown rotation"):
        efa.factor_analysis(R, 1, rotation="spin")


def test_previous_with_other_factor_counts_and_bad_previous():
    R, names, constructs, _, _ = simulate(n=1500)
    two = efa.factor_analysis(R, 2, n=1500, names=names, constructs=constructs)
    three = efa.factor_analysis(R, 3, n=1500, names=names, constructs=constructs, previous=two.to_dict())
    assert three.factors[:2] == ["A", "B"]  # the two matched factors keep their places
    assert "had 2 factors" in three.match
    np.testing.assert_allclose(np.diag(efa.congruence(three.pattern[:, :2], two.pattern)), 1.0, atol=0.1)
    with pytest.raises(InputError, match="one length") as e:
        efa.factor_analysis(R, 2, n=1500, names=names, previous={"loadings": {"A1": [1, 2], "A2": [1]}})
    assert e.value.code == "bad_previous"
    unrelated = efa.factor_analysis(R, 2, n=1500, names=names, previous={"loadings": {"zz": [1.0, 0.0]}})
    assert "shares no items" in unrelated.match


@pytest.mark.parametrize("method", ["minres", "ml"])
def test_objective_gradients_match_finite_differences(hs_R, method):
    # the analytic gradients over the uniquenesses against scipy.optimize.check_grad
    psi = np.linspace(0.3, 0.7, 9)
    if method == "ml":
        args = (hs_R, 3, float(np.linalg.slogdet(hs_R)[1]))
        fun = efa._ml_fun
    else:
        args = (hs_R, 3)
        fun = efa._uls_fun
    err = optimize.check_grad(lambda p: fun(p, *args)[0], lambda p: fun(p, *args)[1], psi, epsilon=1e-7)
    assert err < 1e-5 * (1 + np.linalg.norm(fun(psi, *args)[1]))  # scipy check_grad
    # and the ML criterion equals factanal's form computed from all eigenvalues (R's factanal.fn)
    if method == "ml":
        sc = 1 / np.sqrt(psi)
        e = np.sort(np.linalg.eigvalsh(hs_R * np.outer(sc, sc)))[::-1][3:]
        assert fun(psi, *args)[0] == pytest.approx(-(np.sum(np.log(e) - e) - 3 + 9), rel=1e-10)


def test_non_convergence_is_a_warning(hs_R):
    ex = efa.extract(hs_R, 3, method="ml", max_iter=2)
    assert not ex.converged
    assert any(w.code == "not_converged" and "without converging" in w.message for w in ex.warnings)
    paf = efa.extract(hs_R, 3, method="paf", max_iter=2)
    assert not paf.converged and any("did not converge in 2 iterations" in w.message for w in paf.warnings)


def test_to_dict_writes_plain_floats_and_null_for_a_value_that_is_not_finite():
    """The efa section's matrices as Python floats (numpy's tolist, the same doubles), None where not finite."""
    import dataclasses

    R, names, _constructs, _, _ = simulate(n=800)
    res = efa.factor_analysis(R, 2, n=800, names=names, method="minres", rotation="oblimin")
    d = res.to_dict()
    assert d["loadings"][names[3]] == [float(v) for v in res.pattern[3]]
    assert all(type(v) is float for row in d["factor_correlations"] for v in row)
    assert d["communalities"] == {n: float(v) for n, v in zip(names, res.communalities)}
    bad = res.pattern.copy()
    bad[2, 1] = np.nan
    broken = dataclasses.replace(res, pattern=bad).to_dict()
    assert broken["loadings"][names[2]] == [float(bad[2, 0]), None]
    assert broken["loadings"][names[0]] == [float(v) for v in bad[0]]
    assert json.loads(json.dumps(broken, allow_nan=False))["loadings"][names[2]][1] is None
