"""Confirmatory factor analysis against Holzinger & Swineford (1939), semopy, and simulated structures."""
from __future__ import annotations

import warnings

import numpy as np
import pytest

from server.stats import cfa
from server.stats.errors import InputError

HS_STRUCTURE = {"visual": ["x1", "x2", "x3"], "textual": ["x4", "x5", "x6"], "speed": ["x7", "x8", "x9"]}
HS_ITEMS = [f"x{i}" for i in range(1, 10)]


@pytest.fixture(scope="module")
def hs_S(holzinger) -> np.ndarray:
    # the maximum-likelihood covariance (divisor n), as lavaan uses with likelihood = "normal"
    assert holzinger.shape == (301, 9)  # semopy's holzinger_swineford39_data.csv: 301 pupils
    return np.cov(holzinger.to_numpy(dtype=float).T, ddof=0)


@pytest.fixture(scope="module")
def hs_fit(hs_S) -> cfa.CFAResult:
    return cfa.confirmatory_factor_analysis(hs_S, HS_STRUCTURE, n=301, names=HS_ITEMS, likelihood="normal",
                                            identification="marker")


def codes(res) -> set[str]:
    return {w.code for w in res.warnings}


def param(res, lhs, op, rhs) -> dict:
    return next(p for p in res.parameters if (p["lhs"], p["op"], p["rhs"]) == (lhs, op, rhs))


# ----------------------------------------------------------------------------- Holzinger-Swineford

def test_holzinger_fit_indices_match_lavaan(hs_fit):
    f = hs_fit.fit
    assert hs_fit.converged and hs_fit.fitted and hs_fit.warnings == ()
    # lavaan's cfa(HS.model, data = HolzingerSwineford1939), likelihood "normal" (chi-square = n F_min);
    # the widely reproduced tutorial output, from memory
    assert round(f["chisq"], 1) == 85.3  # from memory (lavaan)
    assert f["df"] == 24  # from memory (lavaan)
    assert round(f["cfi"], 3) == 0.931  # from memory (lavaan)
    assert round(f["tli"], 3) == 0.896  # from memory (lavaan)
    assert round(f["rmsea"], 3) == 0.092  # from memory (lavaan)
    assert [round(x, 3) for x in f["rmsea_ci"]] == [0.071, 0.114]  # from memory (lavaan, 90 %)
    assert round(f["srmr"], 3) == 0.065  # from memory (lavaan)
    assert round(f["baseline"]["chisq"], 3) == 918.852  # from memory (lavaan, baseline model)
    assert f["baseline"]["df"] == 36  # from memory (lavaan)
    assert f["n_parameters"] == 21


def test_holzinger_estimates_and_standard_errors_match_lavaan(hs_fit):
    # lavaan tutorial output (marker method, expected information, n = 301), 3 decimals, from memory
    expected = {("visual", "=~", "x2"): (0.554, 0.100), ("visual", "=~", "x3"): (0.729, 0.109),
                ("textual", "=~", "x5"): (1.113, 0.065), ("textual", "=~", "x6"): (0.926, 0.055),
                ("speed", "=~", "x8"): (1.180, 0.165), ("speed", "=~", "x9"): (1.082, 0.151),
                ("visual", "~~", "textual"): (0.408, 0.074), ("visual", "~~", "speed"): (0.262, 0.056),
                ("textual", "~~", "speed"): (0.173, 0.049), ("visual", "~~", "visual"): (0.809, 0.145),
                ("textual", "~~", "textual"): (0.979, 0.112), ("speed", "~~", "speed"): (0.384, 0.086),
                ("x1", "~~", "x1"): (0.549, 0.114), ("x2", "~~", "x2"): (1.134, 0.102),
                ("x4", "~~", "x4"): (0.371, 0.048), ("x9", "~~", "x9"): (0.566, 0.071)}
    for key, (est, se) in expected.items():
        p = param(hs_fit, *key)
        assert (round(p["est"], 3), round(p["se"], 3)) == (est, se), key  # from memory (lavaan)
    # lavaan standardizedSolution(), std.all, from memory
    std = [0.772, 0.424, 0.581, 0.852, 0.855, 0.838, 0.570, 0.723, 0.665]
    np.testing.assert_allclose(hs_fit.standardized_loadings.sum(axis=1), std, atol=5e-4)  # from memory
    np.testing.assert_allclose(hs_fit.factor_correlations[np.triu_indices(3, 1)], [0.459, 0.471, 0.283],
                               atol=5e-4)  # from memory (lavaan std.all)


def test_holzinger_modification_indices_match_lavaan(hs_fit):
    top = hs_fit.modification_indices
    # lavaan modindices(fit, sort = TRUE): visual =~ x9 36.411 (epc .577, sepc.all .515),
    # x7 ~~ x8 34.145 (sepc.all .859), visual =~ x7 18.631, x8 ~~ x9 14.946; from memory
    assert (top[0]["factor"], top[0]["item"], round(top[0]["mi"], 3)) == ("visual", "x9", 36.411)  # from memory
    assert round(top[0]["epc"], 3) == 0.577 and round(top[0]["sepc_all"], 3) == 0.515  # from memory
    assert (top[1]["items"], round(top[1]["mi"], 3)) == (("x7", "x8"), 34.145)  # from memory
    assert round(top[1]["sepc_all"], 3) == 0.859  # from memory
    assert (top[2]["item"], round(top[2]["mi"], 3)) == ("x7", 18.631)  # from memory
    assert (top[3]["items"], round(top[3]["mi"], 3)) == (("x8", "x9"), 14.946)  # from memory


def test_holzinger_matches_semopy(holzinger, hs_fit):
    import semopy

    desc = "visual =~ x1 + x2 + x3\ntextual =~ x4 + x5 + x6\nspeed =~ x7 + x8 + x9"
    model = semopy.Model(desc)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model.fit(holzinger)
        st = semopy.calc_stats(model).T["Value"]
        est = model.inspect(std_est=True)
    # semopy 2.3 (MLW objective, SLSQP): chi2 = n F_min, like our likelihood="normal"; its optimiser stops
    # at a slightly higher F_min (0.2834077 against our 0.2834070), so estimates agree to about 2e-3
    assert st["chi2"] == pytest.approx(hs_fit.fit["chisq"], abs=2e-3)  # semopy calc_stats
    assert st["DoF"] == hs_fit.fit["df"]  # semopy calc_stats
    assert st["chi2 Baseline"] == pytest.approx(hs_fit.fit["baseline"]["chisq"], abs=1e-3)  # semopy
    assert st["CFI"] == pytest.approx(hs_fit.fit["cfi"], abs=1e-5)  # semopy calc_stats
    assert st["TLI"] == pytest.approx(hs_fit.fit["tli"], abs=1e-5)  # semopy calc_stats
    # semopy's RMSEA divides the n-based chi-square by (n - 1): sqrt((chi2/df - 1)/(n - 1)) = .0923, where
    # ours (and lavaan's) uses the same n as the chi-square: .0921; the same formula from our chi-square agrees
    chisq, df = hs_fit.fit["chisq"], hs_fit.fit["df"]
    assert st["RMSEA"] == pytest.approx(np.sqrt((chisq / df - 1) / 300), abs=1e-5)  # semopy calc_rmsea
    assert round(st["RMSEA"], 3) == round(hs_fit.fit["rmsea"], 3) == 0.092
    loads = est[est["op"] == "~"]
    for _, row in loads.iterrows():
        p = param(hs_fit, row["rval"], "=~", row["lval"])
        assert p["est"] == pytest.approx(row["Estimate"], abs=2e-3)  # semopy inspect Estimate
        assert p["std"] == pytest.approx(row["Est. Std"], abs=2e-3)  # semopy inspect Est. Std
        if p["free"]:
            assert p["se"] == pytest.approx(float(row["Std. Err"]), abs=1e-3)  # semopy, expected information


def test_wishart_likelihood_scales_by_n_minus_1(hs_S, hs_fit):
    res = cfa.confirmatory_factor_analysis(hs_S, HS_STRUCTURE, n=301, names=HS_ITEMS)
    assert res.likelihood == "wishart" and res.n_used == 300
    assert res.fit["chisq"] == pytest.approx(hs_fit.fit["chisq"] * 300 / 301, rel=1e-6)
    assert round(res.fit["chisq"], 2) == 85.02  # 85.306 x 300/301
    np.testing.assert_allclose(res.standardized_loadings, hs_fit.standardized_loadings, atol=1e-6)
    # the standard errors scale by sqrt(301/300)
    np.testing.assert_allclose(res.factor_correlations_se, hs_fit.factor_correlations_se * np.sqrt(301 / 300),
                               atol=1e-6)


def test_identification_and_scale_do_not_change_fit_or_standardized_solution(hs_S, hs_fit):
    d = np.sqrt(np.diag(hs_S))
    R = hs_S / np.outer(d, d)
    res = cfa.confirmatory_factor_analysis(R, HS_STRUCTURE, n=301, names=HS_ITEMS, likelihood="normal")
    assert res.identification == "std_lv"
    assert res.fit["chisq"] == pytest.approx(hs_fit.fit["chisq"], abs=1e-5)
    assert res.fit["srmr"] == pytest.approx(hs_fit.fit["srmr"], abs=1e-6)
    np.testing.assert_allclose(res.standardized_loadings, hs_fit.standardized_loadings, atol=1e-5)
    np.testing.assert_allclose(res.factor_correlations, hs_fit.factor_correlations, atol=1e-5)
    # the delta method is invariant to the parameterisation: the same standardized standard errors
    np.testing.assert_allclose(res.standardized_loadings_se, hs_fit.standardized_loadings_se, atol=1e-5)
    np.testing.assert_allclose(res.factor_correlations_se, hs_fit.factor_correlations_se, atol=1e-5)
    # std_lv on a correlation matrix: loadings are the standardized ones up to sigma_ii (= 1 at the optimum)
    np.testing.assert_allclose(res.loadings, res.standardized_loadings, atol=1e-3)
    assert [m["mi"] for m in res.modification_indices] == pytest.approx(
        [m["mi"] for m in hs_fit.modification_indices], abs=1e-4)


def test_modification_index_approximates_the_likelihood_ratio(hs_S, hs_fit):
    # score test vs likelihood-ratio test for freeing visual =~ x9 (Sorbom 1989): close, not equal
    s = dict(HS_STRUCTURE, visual=["x1", "x2", "x3", "x9"])
    res = cfa.confirmatory_factor_analysis(hs_S, s, n=301, names=HS_ITEMS, likelihood="normal")
    drop = hs_fit.fit["chisq"] - res.fit["chisq"]
    assert res.fit["df"] == 23
    assert 0.7 < drop / hs_fit.modification_indices[0]["mi"] < 1.3


# ----------------------------------------------------------------------------- gradient and recovery

def test_analytic_gradient_matches_finite_differences(hs_S):
    d = np.sqrt(np.diag(hs_S))
    R = hs_S / np.outer(d, d)
    s = dict(HS_STRUCTURE, visual=["x1", "x2", "x3", "x9"])  # with a cross-loading
    pattern = np.zeros((9, 3), dtype=bool)
    for k, items in enumerate(s.values()):
        pattern[[HS_ITEMS.index(i) for i in items], k] = True
    for free_var in (False, True):
        model = cfa._Model(pattern, np.zeros((9, 3)), free_variances=free_var)
        rng = np.random.default_rng(3)
        x = np.concatenate([rng.uniform(0.3, 0.8, model.nl), rng.uniform(0.1, 0.4, model.nphi),
                            rng.uniform(0.3, 0.7, 9)])
        if free_var:
            x[model.nl: model.nl + model.nphi][[j for j, (k, k2) in enumerate(model.phi_idx) if k == k2]] = 1.2
        logdet = np.linalg.slogdet(R)[1]
        _, g = model.objective(x, R, logdet)
        h = 1e-6
        num = np.array([(model.objective(x + h * e, R, logdet)[0] - model.objective(x - h * e, R, logdet)[0])
                        / (2 * h) for e in np.eye(len(x))])
        np.testing.assert_allclose(g, num, atol=1e-7)
        # the rank-two form of dSigma gives the same gradient: tr(G dSigma_f) = 2 u'Gv
        L, Phi, theta = model.unpack(x)
        Sig = model.sigma(L, Phi, theta)
        W = np.linalg.inv(Sig)
        U, V = model.uv(L, Phi)
        np.testing.assert_allclose(2 * np.sum(U * ((W - W @ R @ W) @ V), axis=0), g, atol=1e-10)


def simulate(L, Phi, n, seed):
    rng = np.random.default_rng(seed)
    p, m = L.shape
    f = rng.multivariate_normal(np.zeros(m), Phi, size=n)
    e = rng.standard_normal((n, p)) * np.sqrt(1 - np.sum((L @ Phi) * L, axis=1))
    return f @ L.T + e


def test_simulated_structure_is_recovered():
    p, m = 12, 3
    L = np.zeros((p, m))
    vals = [0.8, 0.7, 0.6, 0.5]
    for k in range(m):
        L[4 * k: 4 * k + 4, k] = vals
    L[3, 0] = -0.5  # a reverse-keyed item
    Phi = np.array([[1, 0.3, 0.5], [0.3, 1, 0.2], [0.5, 0.2, 1]])
    X = simulate(L, Phi, 20_000, seed=11)
    names = [f"q{i}" for i in range(p)]
    struct = {f"F{k}": names[4 * k: 4 * k + 4] for k in range(m)}
    res = cfa.confirmatory_factor_analysis(np.cov(X.T), struct, n=20_000, names=names)
    assert res.converged and res.warnings == ()
    # sampling error of a loading at n = 20,000 is about .006; .03 is five standard errors
    np.testing.assert_allclose(res.standardized_loadings, L, atol=0.03)
    np.testing.assert_allclose(res.factor_correlations, Phi, atol=0.03)
    assert res.fit["rmsea"] < 0.02 and res.fit["cfi"] > 0.99
    se = res.standardized_loadings_se[L != 0]
    assert np.all((se > 0.002) & (se < 0.02))


# ----------------------------------------------------------------------------- warnings and errors

def test_not_identified_structures_warn_without_exception(hs_S):
    res = cfa.confirmatory_factor_analysis(hs_S, {"a": ["x1"], "b": ["x2", "x3", "x4"]}, n=301, names=HS_ITEMS)
    assert not res.fitted and "not_identified" in codes(res)
    assert res.standardized_loadings is None and res.fit["chisq"] is None
    assert next(w for w in res.warnings if w.code == "not_identified").items == ("a",)
    one = cfa.confirmatory_factor_analysis(hs_S, {"a": ["x1", "x2"]}, n=301, names=HS_ITEMS)
    assert not one.fitted and "not_identified" in codes(one)  # one factor needs 3 items
    assert "items_not_in_structure" in codes(one)


def test_heywood_case_is_reported():
    # r_ab = r_ac = r_ad = .8 and .5 among b, c, d imply a squared loading of .8 x .8 / .5 = 1.28 for a
    R = np.full((4, 4), 0.5)
    R[0, 1:] = R[1:, 0] = 0.8
    np.fill_diagonal(R, 1.0)
    res = cfa.confirmatory_factor_analysis(R, {"F": ["a", "b", "c", "d"]}, n=500, names=["a", "b", "c", "d"])
    assert res.fitted and "heywood" in codes(res) and res.heywood == ("a",)
    assert res.uniquenesses[0] == pytest.approx(0.0, abs=1e-6)


def test_too_few_respondents_and_non_convergence_are_reported(hs_S):
    res = cfa.confirmatory_factor_analysis(hs_S, HS_STRUCTURE, n=30, names=HS_ITEMS, max_iter=2)
    assert {"too_few_respondents", "not_converged"} <= codes(res)  # 30 < 5 x 9: common practice
    assert not res.converged


def test_singular_matrix_is_a_warning(hs_S):
    S = hs_S.copy()
    S[8, :] = S[:, 8] = S[7, :]
    S[8, 8] = S[7, 7]   # x9 a copy of x8
    res = cfa.confirmatory_factor_analysis(S, HS_STRUCTURE, n=301, names=HS_ITEMS)
    assert not res.fitted and "singular_matrix" in codes(res)


@pytest.mark.parametrize("kwargs, code", [
    ({"structure": {"a": ["x1", "nope"]}}, "unknown_item"),
    ({"structure": {}}, "bad_structure"),
    ({"structure": {"a": "x1"}}, "bad_structure"),
    ({"n": 1}, "bad_n"),
    ({"identification": "effects"}, "bad_option"),
    ({"likelihood": "fiml"}, "bad_option"),
    ({"names": HS_ITEMS[:3]}, "bad_names"),
])
def test_bad_input_raises_input_error(hs_S, kwargs, code):
    args = {"structure": HS_STRUCTURE, "n": 301, "names": HS_ITEMS} | kwargs
    S = args.pop("S", hs_S)
    with pytest.raises(InputError) as e:
        cfa.confirmatory_factor_analysis(S, args.pop("structure"), **args)
    assert e.value.code == code
