"""Uncertainties that are real, and parameter numbering, on every reference file and benchmark case.

A covariance is reported only when it is positive semi-definite and well
conditioned; parameters the data cannot determine are named, their σ is NaN
(JSON null, "not determined" in the report) and a warning says why.
Correlations stay within [−1, 1].  Each group is numbered from the lowest
frequency up (docs/fitting.md).
"""

import json
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

import benchfit
from benchfit.data import FrequencyResponse
from benchfit.fileio import to_json_text
from benchfit.fitting import fit
from benchfit.fitting.parameters import Structure, renumbering, response
from benchfit.fitting.refine import Refined, renumbered
from benchfit.fitting.synthetic import converter_plant, from_factors, sweep
from benchfit.fitting.uncertainty import COND_MAX, correlation, covariance

SKRF_DATA = Path(__import__("skrf").__file__).parent / "data"


# ----- the covariance itself ------------------------------------------------------------
def test_well_conditioned_covariance_is_the_inverse_normal_matrix():
    # Reference: the textbook (JᵀJ)⁻¹·χ²_red (Numerical Recipes, 3rd ed., sec. 15.4),
    # formed directly with numpy; well conditioned, so both must agree.
    rng = np.random.default_rng(1)
    jac = rng.normal(size=(200, 5)) * np.array([1.0, 1e-3, 1e4, 2.0, 1e-6])
    c = covariance(jac, 2.5)
    want = np.linalg.inv(jac.T @ jac) * 2.5
    assert c.undetermined == () and c.reason == ""
    np.testing.assert_allclose(c.matrix, want, rtol=1e-9)
    np.testing.assert_allclose(c.stderr, np.sqrt(np.diag(want)), rtol=1e-9)


def test_collinear_parameter_is_named_and_the_rest_stays_positive_definite():
    rng = np.random.default_rng(2)
    a = rng.normal(size=(300, 3))
    jac = np.column_stack([a, 2.0 * a[:, 1] + 1e-12 * rng.normal(size=300)])  # 4th = 2 × 2nd
    c = covariance(jac, 1.0)
    assert len(c.undetermined) == 1 and c.undetermined[0] in (1, 3)
    assert c.condition > COND_MAX and "other parameters" in c.reason
    keep = [i for i in range(4) if i not in c.undetermined]
    sub = c.matrix[np.ix_(keep, keep)]
    assert np.all(np.isfinite(sub)) and np.all(np.linalg.eigvalsh(sub) > 0)
    assert np.all(np.isnan(c.matrix[c.undetermined[0]]))
    # The others' covariance is the one with the set-aside parameter held: the
    # inverse normal matrix of the remaining columns.
    np.testing.assert_allclose(sub, np.linalg.inv(jac[:, keep].T @ jac[:, keep]), rtol=1e-8)


def test_a_parameter_without_effect_is_not_determined():
    jac = np.column_stack([np.ones(10), np.zeros(10), np.arange(10.0)])
    c = covariance(jac, 1.0)
    assert c.undetermined == (1,) and "does not depend" in c.reason


def test_correlation_stays_within_unit_interval_and_keeps_nan_rows():
    cov = np.array([[4.0, 2.0 + 1e-12, np.nan], [2.0, 1.0, np.nan], [np.nan, np.nan, np.nan]])
    r = correlation(cov)
    assert np.all(np.abs(r[:2, :2]) <= 1.0) and np.all(np.diag(r) == 1.0)
    assert np.isnan(r[2, 0]) and np.isnan(r[0, 2]) and np.isnan(r[2, 1])


# ----- numbering --------------------------------------------------------------------
def test_renumbering_orders_each_group_by_frequency():
    st = Structure(real_poles=2, pole_pairs=2, real_zeros=2, zero_pairs=0, delay=True)
    v = np.array([3.0, 350e3, 1e3, 5e5, 0.7, 2e4, 3.0, -4e6, 2e3, 1e-7])
    perm = renumbering(st, v)
    w = v[perm]
    np.testing.assert_array_equal(w, [3.0, 1e3, 350e3, 2e4, 3.0, 5e5, 0.7, 2e3, -4e6, 1e-7])
    # The same model: reference response from scipy.signal.freqs_zpk.
    f = np.geomspace(10, 1e7, 50)
    np.testing.assert_allclose(response(st, w, 2j * np.pi * f), response(st, v, 2j * np.pi * f),
                               rtol=1e-12)


def test_renumbered_refinement_carries_sigma_and_covariance_with_the_names():
    # pole1 (fixed by the user) sits above pole2 after refinement.
    st = Structure(real_poles=2)
    ref = Refined(values=np.array([2.0, 350e3, 1e3]), stderr=np.array([0.1, np.nan, 5.0]),
                  varied=("gain", "pole2_hz"), covariance=np.array([[0.01, 0.2], [0.2, 25.0]]),
                  evaluations=1, success=True, chisqr=1.0, redchi=1.0, message="")
    new, moved = renumbered(st, ref)
    assert moved == {"pole1_hz": "pole2_hz", "pole2_hz": "pole1_hz"}
    np.testing.assert_array_equal(new.values, [2.0, 1e3, 350e3])
    np.testing.assert_array_equal(new.stderr, [0.1, 5.0, np.nan])
    assert new.varied == ("gain", "pole1_hz")
    np.testing.assert_array_equal(new.covariance, ref.covariance)


def test_fixed_parameter_keeps_its_flag_when_renumbered():
    # Two real poles; the user holds "pole1_hz" at 350 kHz, above the other pole:
    # the result numbers it pole2_hz, still fixed, and a note says so.
    f = np.geomspace(10, 1e5, 201)
    p = [-2 * np.pi * 1e3, -2 * np.pi * 350e3]
    _, h = signal.freqs_zpk([], p, np.prod(np.abs(p)), 2 * np.pi * f)  # reference: scipy
    res = fit(FrequencyResponse(freq_hz=f, response=h), order=2, delay="none",
              fix={"pole1_hz": 350e3})
    assert res.stats["order"] == 2
    p1, p2 = res.parameter("pole1_hz"), res.parameter("pole2_hz")
    assert p2.fixed and p2.value == 350e3 and not p1.fixed
    assert p1.value == pytest.approx(1e3, rel=1e-6)
    assert any("pole1_hz is now pole2_hz" in n for n in res.notes)


# ----- every reference file and benchmark case ----------------------------------------
def _reference_cases():
    """(label, response): scikit-rf's shipped Touchstone files (measured and simulated
    data nobody here wrote) that benchfit can fit, and the benchmark plants."""
    out = []
    for path in sorted(SKRF_DATA.glob("*.s[12]p")):
        for par in (("S11", "S21") if path.suffix == ".s2p" else ("S11",)):
            try:
                r = benchfit.read_sweep(path, param=par)
            except benchfit.InputError:
                continue
            mag, ph = np.abs(r.response), np.unwrap(np.angle(r.response))
            if np.any(mag == 0) or (np.ptp(np.log(mag)) < 1e-9 and np.ptp(ph) < 1e-9):
                continue  # a log fit cannot take exact zeros; a constant has nothing to fit
            out.append((f"{path.name}:{par}", r))
    plant = converter_plant()
    out.append(("converter", sweep(plant)))
    out.append(("converter noisy", sweep(plant, noise_db=0.1, noise_deg=0.5,
                                         rng=np.random.default_rng(0))))
    out.append(("converter 150 ns", sweep(converter_plant(delay_s=150e-9), noise_db=0.1,
                                          noise_deg=0.5, rng=np.random.default_rng(1))))
    f = np.geomspace(10, 1e5, 201)
    for ratio in (2.0, 3.5, 5.0, 10.0):
        m = from_factors(1.0, poles_hz=(1e3, ratio * 1e5))
        out.append((f"pole at {ratio}x top", sweep(m, f, noise_db=0.01, noise_deg=0.05,
                                                   rng=np.random.default_rng(3))))
    return out


CASES = _reference_cases()


@pytest.fixture(scope="module")
def results():
    out = {}
    for label, r in CASES:
        try:
            out[label] = fit(r)
        except benchfit.FitError:
            continue
    return out


def test_reference_cases_are_found():
    labels = [c[0] for c in CASES]
    assert "line.s2p:S21" in labels and "ro,3.s1p:S11" in labels and len(labels) >= 20


@pytest.mark.parametrize("label", [c[0] for c in CASES])
def test_uncertainties_are_real_on_every_reference_case(label, results):
    if label not in results:
        pytest.skip("benchfit declines to fit this file (FitError)")
    res = results[label]
    c = np.asarray(res.correlation, dtype=float)
    cov = np.asarray(res.covariance, dtype=float)
    n = len(res.varied)
    assert c.shape == cov.shape == (n, n)
    und = set(res.undetermined)
    for k, name in enumerate(res.varied):
        p = res.parameter(name)
        assert c[k, k] == 1.0  # no NaN on the diagonal
        if name in und:
            assert np.isnan(p.stderr) and np.all(np.isnan(cov[k]))
            continue
        if not np.isfinite(cov[k, k]):
            continue  # no covariance at all (refinement not at an optimum): warned below
        assert p.stderr > 0 and p.stderr == pytest.approx(np.sqrt(cov[k, k]))
    finite = np.isfinite(c)
    assert np.all(np.abs(c[finite]) <= 1.0)
    known = [k for k in range(n) if np.isfinite(cov[k, k])]
    if known:
        sub = cov[np.ix_(known, known)]
        assert np.all(np.isfinite(sub))
        lam = np.linalg.eigvalsh(sub / np.sqrt(np.outer(np.diag(sub), np.diag(sub))))
        assert lam.min() > -1e-9, lam  # positive semi-definite
    missing = [nm for nm in res.varied if not np.isfinite(res.parameter(nm).stderr)]
    if missing:
        text = " ".join(res.warnings)
        assert "not determined" in text or "no uncertainties" in text, res.warnings
        assert all(nm in text for nm in und)
    # JSON holds null for a σ not given and lists the parameters not determined.
    d = json.loads(to_json_text(res))
    for p in d["parameters"]:
        assert p["stderr"] is None or p["stderr"] > 0 or p["fixed"], p
    assert d["undetermined"] == list(res.undetermined)


@pytest.mark.parametrize("label", [c[0] for c in CASES])
def test_groups_are_numbered_from_the_lowest_frequency_up(label, results):
    if label not in results:
        pytest.skip("benchfit declines to fit this file (FitError)")
    res = results[label]
    for prefix, suffix in (("pole", "_hz"), ("pair", "_f0_hz"), ("zero", "_hz"),
                           ("zero_pair", "_f0_hz")):
        vals = [abs(p.value) for p in res.parameters
                if p.name.startswith(prefix) and p.name.endswith(suffix)
                and p.name[len(prefix)].isdigit()]
        assert vals == sorted(vals), (prefix, vals)


def test_json_writes_null_for_a_sigma_not_determined(tmp_path, results):
    res = results["line.s2p:S21"]
    assert res.undetermined, "line.s2p S21 (a lossy line as poles and zeros) should be ill-conditioned"
    out = tmp_path / "fit.json"
    res.to_json(out)
    d = json.loads(out.read_text())
    by_name = {p["name"]: p for p in d["parameters"]}
    assert all(by_name[nm]["stderr"] is None for nm in res.undetermined)
    back = type(res).from_json(out)
    assert back.undetermined == res.undetermined
    assert "not determined" in res.report()


def test_bounded_parameter_takes_the_start_inside_its_bounds():
    # As above with a bound instead of a fixed value: the 1 kHz pole must survive.
    # Reference response: scipy.signal.freqs_zpk.
    f = np.geomspace(10, 1e5, 201)
    p = [-2 * np.pi * 1e3, -2 * np.pi * 350e3]
    _, h = signal.freqs_zpk([], p, np.prod(np.abs(p)), 2 * np.pi * f)
    res = fit(FrequencyResponse(freq_hz=f, response=h), order=2, delay="none",
              bounds={"pole1_hz": (300e3, 400e3)})
    assert res.parameter("pole1_hz").value == pytest.approx(1e3, rel=1e-6)
    assert res.parameter("pole2_hz").value == pytest.approx(350e3, rel=1e-6)
    assert res.model.is_stable


# ----- a parameter on its bound -----------------------------------------------------------
def test_on_bound_is_a_tiny_relative_distance_to_either_bound():
    from benchfit.fitting.uncertainty import AT_BOUND_REL, on_bound
    inf = np.inf
    v = np.array([250.0, 250.0 * (1 - 0.1 * AT_BOUND_REL), 250.0 * (1 - 100 * AT_BOUND_REL),
                  0.0, 1e-12, 5.0])
    lo = np.array([-inf, -inf, -inf, 0.0, 0.0, -inf])
    hi = np.array([250.0, 250.0, 250.0, inf, inf, inf])
    assert on_bound(v, lo, hi).tolist() == [True, True, False, True, False, False]


def test_held_covariance_is_the_inverse_normal_matrix_without_the_held_column():
    # Reference: (JᵀJ)⁻¹·χ²_red of the free columns only (Numerical Recipes, 3rd ed.,
    # sec. 15.4), formed directly with numpy: holding a parameter removes its column.
    from benchfit.fitting.uncertainty import held_covariance
    rng = np.random.default_rng(4)
    jac = rng.normal(size=(150, 4)) * np.array([1.0, 1e-3, 1e4, 2.0])
    held = np.array([False, True, False, False])
    c = held_covariance(jac, 1.7, held)
    free = [0, 2, 3]
    want = np.linalg.inv(jac[:, free].T @ jac[:, free]) * 1.7
    np.testing.assert_allclose(c.matrix[np.ix_(free, free)], want, rtol=1e-9)
    assert np.all(np.isnan(c.matrix[1])) and np.all(np.isnan(c.matrix[:, 1]))
    assert c.undetermined == ()  # held for its bound, not for the data
    assert np.isnan(correlation(c.matrix)[0, 1]) and correlation(c.matrix)[1, 1] == 1.0


def test_a_parameter_on_its_bound_is_flagged_and_has_no_sigma(tmp_path):
    # Two real poles, 1 kHz and 20 kHz (reference response: scipy.signal.freqs_zpk), with the
    # low pole bounded below its true value: the fit ends on the bound, where the linearised
    # covariance is not valid (the χ² gradient is not zero), so no σ may be given.
    f = np.geomspace(10, 1e5, 201)
    p = [-2 * np.pi * 1e3, -2 * np.pi * 20e3]
    _, h = signal.freqs_zpk([], p, np.prod(np.abs(p)), 2 * np.pi * f)
    rng = np.random.default_rng(2)
    h = h * 10 ** (0.01 * rng.standard_normal(f.size) / 20) * np.exp(
        1j * np.radians(0.05 * rng.standard_normal(f.size)))
    r = FrequencyResponse(freq_hz=f, response=h)
    res = fit(r, order=2, delay="none", bounds={"pole1_hz": (0.0, 800.0)})
    pb = res.parameter("pole1_hz")
    assert pb.value == pytest.approx(800.0, rel=1e-6)
    assert pb.at_bound and not np.isfinite(pb.stderr)
    assert res.at_bound == ("pole1_hz",) and "pole1_hz" not in res.undetermined
    assert np.isfinite(res.parameter("pole2_hz").stderr)
    assert any(w.startswith("at bound: pole1_hz") for w in res.warnings)
    line = next(ln for ln in res.report().splitlines() if ln.rstrip().endswith("pole1_hz"))
    assert "not determined" in line and "at bound" in line
    out = tmp_path / "fit.json"
    res.to_json(out)
    d = json.loads(out.read_text())
    row = next(x for x in d["parameters"] if x["name"] == "pole1_hz")
    assert row["stderr"] is None and row["at_bound"] is True and d["at_bound"] == ["pole1_hz"]
    assert type(res).from_json(out).at_bound == ("pole1_hz",)
    # A bound the fit does not reach changes nothing: finite σ, no flag.
    free = fit(r, order=2, delay="none", bounds={"pole1_hz": (0.0, 2000.0)})
    assert not free.parameter("pole1_hz").at_bound and free.at_bound == ()
    assert np.isfinite(free.parameter("pole1_hz").stderr)
    assert not any(w.startswith("at bound") for w in free.warnings)
