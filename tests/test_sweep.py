"""Parameter sweep, Hopf points and the first Lyapunov coefficient (gen/analysis/sweep/ and
gen/analysis/hopf.py)."""

from __future__ import annotations

import functools
import math

import numpy as np
import pytest
import sympy

from orbitfix.gen.analysis.hopf import first_lyapunov_coefficient
from orbitfix.gen.analysis.sweep import sweep
from orbitfix.gen.errors import InputError
from orbitfix.gen.model.definition import define_model

# FitzHugh, "Impulses and physiological states in theoretical models of nerve membrane",
# Biophysical Journal 1 (1961): v' = v - v^3/3 - w + I, w' = eps (v + a - b w), with a = 0.7,
# b = 0.8 and time-scale parameter eps = 0.08.
A, B, EPS = 0.7, 0.8, 0.08


def fitzhugh_nagumo(current: float = 0.5):
    return define_model("fitzhugh_nagumo", {"v": -1.0, "w": -0.5},
                        {"v": "v - v^3/3 - w + I", "w": "eps*(v + a - b*w)"},
                        {"I": current, "a": A, "b": B, "eps": EPS}, cycle_hz=1.0, loop_hz=100.0)


def stuart_landau(s: float, omega: float = 2.0, mu: float = 0.0):
    """The Hopf normal form in Cartesian coordinates (Stuart-Landau): in polar form
    r' = mu r + s r^3, theta' = omega."""
    return define_model("stuart_landau", {"x": 1.0, "y": 0.0},
                        {"x": "mu*x - om*y + s*(x^2 + y^2)*x", "y": "om*x + mu*y + s*(x^2 + y^2)*y"},
                        {"mu": mu, "om": omega, "s": s}, cycle_hz=1.0, loop_hz=100.0)


def planar_l1(model, state: np.ndarray) -> float:
    """Kuznetsov, Elements of Applied Bifurcation Theory (2004), sec. 3.5, eq. (3.20), for a planar
    system: with z = <p, x - x0>, z' = i w z + g(z, conj z), g(z, conj z) = <p, F(x0 + z q +
    conj(z q))>, the Taylor coefficients g20, g11, g21 of g give
    l1 = Re(i g20 g11 + w g21) / (2 w^2). Done here symbolically, independently of gen/analysis/hopf.py's
    multilinear forms (only the eigenvectors are shared, normalised as there: <q,q> = <p,q> = 1)."""
    x = sympy.Matrix(model.state_symbols)
    f = sympy.Matrix(model.resolved_equations)
    jac = np.array(f.jacobian(x).subs(dict(zip(x, state, strict=True))), dtype=float)
    values, vectors = np.linalg.eig(jac)
    i = int(np.argmax(values.imag))
    omega = float(values[i].imag)
    q = vectors[:, i] / np.linalg.norm(vectors[:, i])
    left_values, left_vectors = np.linalg.eig(jac.T)
    p = left_vectors[:, int(np.argmin(np.abs(left_values - np.conj(values[i]))))]
    p = p / np.conj(np.vdot(p, q))
    z, zbar = sympy.symbols("z zbar")
    point = [state[k] + z * complex(q[k]) + zbar * complex(np.conj(q[k])) for k in range(2)]
    g = sum(complex(np.conj(p[k])) * f[k].subs(dict(zip(x, point, strict=True))) for k in range(2))
    g = sympy.expand(g)

    def coefficient(a: int, b: int) -> complex:
        return complex(sympy.diff(g, z, a, zbar, b).subs({z: 0, zbar: 0}))

    g20, g11, g21 = coefficient(2, 0), coefficient(1, 1), coefficient(2, 1)
    return float((1j * g20 * g11 + omega * g21).real / (2 * omega**2))


# -- the first Lyapunov coefficient ----------------------------------------------------------------


@pytest.mark.parametrize("s", [-1.5, -0.2, 0.4, 2.0])
def test_normal_form_gives_l1_of_the_sign_of_s(s):
    result = first_lyapunov_coefficient(stuart_landau(s), np.zeros(2))
    # Kuznetsov (2004) sec. 3.5: for the normal form the sign of l1 is the sign of s (the r^3
    # coefficient); with <q,q> = 1, |x|^2 = 2 |z|^2, so l1 = 2 s / omega exactly
    assert np.sign(result.value) == np.sign(s)
    assert result.value == pytest.approx(2 * s / 2.0, rel=1e-12)
    assert result.frequency == pytest.approx(2.0, rel=1e-12)
    assert result.kind == ("supercritical" if s < 0 else "subcritical")


def test_general_formula_matches_the_planar_formula_on_a_polynomial_field():
    rng = np.random.default_rng(7)   # invented coefficients, a scenario of our own
    c = rng.uniform(-1.0, 1.0, 14)
    monomials = ["x^2", "x*y", "y^2", "x^3", "x^2*y", "x*y^2", "y^3"]
    fx = " + ".join(f"({c[k]:.6f})*{m}" for k, m in enumerate(monomials))
    fy = " + ".join(f"({c[7 + k]:.6f})*{m}" for k, m in enumerate(monomials))
    model = define_model("cubic", {"x": 0.1, "y": 0.0},
                         {"x": f"-1.3*y + {fx}", "y": f"1.3*x + {fy}"}, cycle_hz=1.0, loop_hz=100.0)
    expected = planar_l1(model, np.zeros(2))   # Kuznetsov (2004) eq. (3.20)
    assert first_lyapunov_coefficient(model, np.zeros(2)).value == pytest.approx(expected, rel=1e-9)


def test_vanderpol_at_zero_damping_is_degenerate():
    # Strogatz, Nonlinear Dynamics and Chaos (1994), sec. 7.6: at mu = 0 the Van der Pol equation is
    # the linear harmonic oscillator, so every coefficient of the normal form vanishes
    model = define_model("vdp", {"x": 1.0, "y": 0.0}, {"x": "y", "y": "mu*(1 - x^2)*y - x"},
                         {"mu": 0.0}, cycle_hz=1.0, loop_hz=100.0)
    result = first_lyapunov_coefficient(model, np.zeros(2))
    assert result.kind == "degenerate" and result.value == 0.0


# -- Hopf points along a sweep ----------------------------------------------------------------------


def fitzhugh_closed_form() -> list[tuple[float, float, float]]:
    """(I, v, omega) at the two Hopf points. FitzHugh (1961) model; standard linear analysis: the
    Jacobian [[1 - v^2, -1], [eps, -eps b]] has trace zero at v^2 = 1 - eps b, its determinant
    there is w^2 = eps (1 - eps b^2), and the equilibrium has w = (v + a)/b, I = w - v + v^3/3."""
    points = []
    for v in (-math.sqrt(1 - EPS * B), math.sqrt(1 - EPS * B)):
        current = (v + A) / B - v + v**3 / 3
        points.append((current, v, math.sqrt(EPS * (1 - EPS * B**2))))
    return points


@functools.cache
def fitzhugh_sweep():
    return sweep(fitzhugh_nagumo(), "I", 0.0, 1.6, samples=17, follow_cycles=False)


def test_fitzhugh_nagumo_hopf_points_match_the_closed_form():
    result = fitzhugh_sweep()
    assert len(result.hopf) == 2
    for found, (current, v, omega) in zip(result.hopf, fitzhugh_closed_form(), strict=True):
        assert found.param_value == pytest.approx(current, rel=1e-9, abs=1e-9)
        assert found.equilibrium[0] == pytest.approx(v, rel=1e-9)
        assert found.frequency == pytest.approx(omega, rel=1e-9)


def test_fitzhugh_nagumo_l1_matches_the_planar_formula():
    for found in fitzhugh_sweep().hopf:
        model = fitzhugh_nagumo(found.param_value)
        expected = planar_l1(model, found.equilibrium)     # Kuznetsov (2004) eq. (3.20)
        assert found.lyapunov.value == pytest.approx(expected, rel=1e-6)
        assert found.kind == ("subcritical" if expected > 0 else "supercritical")


def test_tracked_equilibria_solve_the_fitzhugh_cubic():
    # the equilibrium's v solves v - v^3/3 - (v + a)/b + I = 0; numpy's polynomial roots are the
    # reference (b < 1 makes it the only real root)
    for sample in fitzhugh_sweep().samples:
        roots = np.roots([-1 / 3, 0.0, 1 - 1 / B, sample.param_value - A / B])
        real = roots[np.abs(roots.imag) < 1e-9].real
        assert len(sample.equilibria) == len(real) == 1
        assert sample.equilibria[0].state[0] == pytest.approx(real[0], abs=1e-10)


@pytest.mark.parametrize("s", [-1.0, 0.5])
def test_normal_form_branch_has_the_exact_radius_period_and_multiplier(s):
    omega = 2.0
    result = sweep(stuart_landau(s, omega), "mu", -0.4, 0.4, samples=5)
    (hopf,) = result.hopf
    assert hopf.param_value == pytest.approx(0.0, abs=1e-9)
    assert hopf.kind == ("supercritical" if s < 0 else "subcritical")
    assert result.complete and len(result.branch) >= 4
    for point in result.branch:
        mu = point.param_value
        assert point.found and mu * s < 0   # the cycle lives where -mu/s > 0
        # exact, from the polar form r' = mu r + s r^3, theta' = omega: radius sqrt(-mu/s),
        # period 2 pi / omega, and the radial rate -2 mu at the cycle gives the multiplier
        # exp(-2 mu T)
        period = 2 * math.pi / omega
        assert point.amplitude == pytest.approx(math.sqrt(-mu / s), rel=1e-8)
        assert point.period == pytest.approx(period, rel=1e-9)
        assert point.max_multiplier == pytest.approx(math.exp(-2 * mu * period), rel=1e-6)
        assert point.stable == (s < 0)


def test_sweep_without_a_hopf_point_says_so():
    result = sweep(stuart_landau(-1.0), "mu", 0.1, 0.5, samples=5, follow_cycles=False)
    assert result.hopf == () and any("no Hopf point" in note for note in result.notes)


@pytest.mark.parametrize(("parameter", "start", "stop", "message"), [
    ("nope", 0.0, 1.0, "no parameter 'nope'"),
    ("mu", 0.5, 0.5, "must cover a range"),
    ("mu", 0.0, math.inf, "finite"),
    ("mu", math.nan, 1.0, "finite"),
])
def test_bad_requests_are_input_errors(parameter, start, stop, message):
    with pytest.raises(InputError, match=message):
        sweep(stuart_landau(-1.0), parameter, start, stop)


# -- the command line ----------------------------------------------------------------------------

NORMAL_FORM_FILE = """
# an invented demo: the Hopf normal form as the rhythm of a small pump drive
name = "pump_rhythm"
[states]
x = { initial = 0.5 }
y = { initial = 0.0 }
[parameters]
mu = { value = 0.2 }
[equations]
x = "mu*x - 2*y - (x^2 + y^2)*x"
y = "2*x + mu*y - (x^2 + y^2)*y"
[rhythm]
cycle_hz = 1.0
loop_hz = 200
"""


def run_cli(capsys, tmp_path, *argv: str) -> tuple[int, str, str]:
    from orbitfix.verify.cli.main import main

    path = tmp_path / "pump_rhythm.toml"
    path.write_text(NORMAL_FORM_FILE)
    code = main(["sweep", str(path), *argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_sweep_json_contract(capsys, tmp_path):
    import json

    code, out, _ = run_cli(capsys, tmp_path, "--param", "mu", "--from", "-0.2", "--to", "0.2",
                           "--samples", "5", "--json")
    assert code == 0
    data = json.loads(out)
    (hopf,) = data["hopf"]
    for key in ("param_value", "equilibrium", "frequency", "kind", "first_lyapunov_coefficient"):
        assert key in hopf
    assert hopf["kind"] == "supercritical"
    assert hopf["frequency"] == pytest.approx(2.0, rel=1e-12)   # the normal form's omega, exact
    assert data["branch"]
    for point in data["branch"]:
        assert set(point) >= {"param_value", "period", "amplitude", "max_multiplier"}
        # exact for the normal form with s = -1: radius sqrt(mu)
        assert point["amplitude"] == pytest.approx(math.sqrt(point["param_value"]), rel=1e-8)


def test_sweep_text_report(capsys, tmp_path):
    code, out, _ = run_cli(capsys, tmp_path, "--param", "mu", "--from", "-0.2", "--to", "0.2",
                           "--samples", "5", "--no-cycles")
    assert code == 0
    assert "Hopf points: 1" in out and "supercritical" in out
    assert "Caution" not in out  # sweep writes no code: the caution is for gen and verify


@pytest.mark.parametrize(("argv", "message"), [
    (("--param", "nu", "--from", "0", "--to", "1"), "no parameter 'nu'"),
    (("--param", "mu", "--from", "1", "--to", "1"), "must cover a range"),
    (("--param", "mu", "--from", "nan", "--to", "1"), "finite"),
    (("--param", "mu", "--from", "0", "--to", "1", "--samples", "2"), "samples"),
])
def test_sweep_bad_input_exits_2_with_a_message(capsys, tmp_path, argv, message):
    code, _, err = run_cli(capsys, tmp_path, *argv)
    assert code == 2 and message in err and "Traceback" not in err


def test_vanderpol_sweep_reports_its_hopf_point_as_degenerate():
    # Strogatz (1994) sec. 7.6 and 8.2: at mu = 0 the Van der Pol equation is linear (the harmonic
    # oscillator, frequency 1), so the located point, within the bisection's tolerance of mu = 0,
    # must not be given a kind
    model = define_model("vdp", {"x": 1.0, "y": 0.0}, {"x": "y", "y": "mu*(1 - x^2)*y - x"},
                         {"mu": 0.5}, cycle_hz=1.0, loop_hz=100.0)
    (hopf,) = sweep(model, "mu", -1.0, 1.0, samples=11, follow_cycles=False).hopf
    assert hopf.param_value == pytest.approx(0.0, abs=1e-9)
    assert hopf.frequency == pytest.approx(1.0, rel=1e-9)
    assert hopf.kind == "degenerate"


# -- branches followed through folds ----------------------------------------------------------------


@functools.cache
def bautin_sweep():
    from orbitfix.gen.model.model_file import load_model

    return sweep(load_model("vibration_drive"), "mu", -1.5, 0.5, samples=9, workers=1)


@pytest.mark.slow
def test_bautin_fold_of_cycles_is_at_the_hand_derived_point():
    # Kuznetsov, Elements of Applied Bifurcation Theory (2004), sec. 8.3 (Bautin normal form),
    # our model r' = r (mu + 2 r^2 - r^4): cycles where mu = r^4 - 2 r^2; the fold is where
    # d mu / d r = 4 r^3 - 4 r = 0, so r = 1 and mu = -1 (derived by hand)
    result = bautin_sweep()
    (hopf,) = result.hopf
    assert hopf.kind == "subcritical"
    assert result.complete and result.reason == ""
    fold = result.branches[0].folds[0]
    assert fold.param_value == pytest.approx(-1.0, abs=1e-6)
    assert fold.amplitude == pytest.approx(1.0, abs=1e-5)
    assert abs(fold.multipliers[0]) == pytest.approx(1.0, abs=1e-5)


@pytest.mark.slow
def test_bautin_branch_is_unstable_then_stable_with_the_exact_multipliers():
    # same normal form: on the cycle r' linearised gives r g'(r) = 4 r^2 (1 - r^2), so the
    # nontrivial multiplier is exp(T 4 r^2 (1 - r^2)), T = 2 pi / omega (derived by hand)
    branch = bautin_sweep().branches[0]
    assert not branch.points[0].stable             # born unstable: never "a small stable cycle grows"
    assert branch.points[-1].stable
    for row in branch.points:
        r = row.amplitude
        # the integration's tolerance is amplified by 1 / |1 - multiplier| near the fold
        assert row.param_value == pytest.approx(r**4 - 2 * r**2, abs=1e-5)
        expected = math.exp(1.0 * 4 * r**2 * (1 - r**2))
        assert row.max_multiplier == pytest.approx(expected, rel=1e-4)
        assert row.stable == (r > 1.0)


def test_vanderpol_branch_is_kept_through_small_mu():
    # Strogatz (1994) sec. 7.6: for small mu the Van der Pol cycle has amplitude close to 2; the
    # cycle exists (stable for mu > 0, unstable for mu < 0 by time reversal) at every mu != 0
    model = define_model("vdp", {"x": 1.0, "y": 0.0}, {"x": "y", "y": "mu*(1 - x^2)*y - x"},
                         {"mu": 0.5}, cycle_hz=1.0, loop_hz=100.0)
    result = sweep(model, "mu", -0.5, 1.0, samples=7, workers=1)
    assert result.complete, result.reason
    rows = result.branch
    assert min(r.param_value for r in rows) < -0.4 and max(r.param_value for r in rows) > 0.9
    for row in rows:
        assert row.found and row.stable == (row.param_value > 0)
        if abs(row.param_value) < 0.1:
            assert row.amplitude == pytest.approx(2.0, abs=0.01)
    text = " ".join(result.notes) + result.reason
    assert "chaotic" not in text and "quasi-periodic" not in text


def test_lost_branch_says_incomplete_with_a_reason():
    result = sweep(fitzhugh_nagumo(), "I", 0.0, 1.5, samples=9, workers=1, seconds=3.0)
    data = result.to_json()
    assert data["complete"] is False and data["reason"]
    assert any(not b["complete"] and b["reason"] for b in data["branches"])


@pytest.mark.slow
def test_fitzhugh_nagumo_large_stable_cycle_matches_scipy_shooting():
    # reference: scipy's solve_ivp (DOP853, tight tolerances) from the reported cycle point over
    # many periods, then the period from successive upward crossings of v through the point's v;
    # independent of the sweep's own shooting
    from scipy.integrate import solve_ivp

    result = sweep(fitzhugh_nagumo(), "I", 0.0, 1.5, samples=31, workers=1, seconds=240.0)
    stable = [r for r in result.branch if r.stable and 0.5 <= r.param_value <= 1.2]
    assert stable, "the large stable cycle between the Hopf points must be reported"
    for row in stable[:: max(1, len(stable) // 3)]:
        current = row.param_value

        def field(_t, y, current=current):
            v, w = y
            return [v - v**3 / 3 - w + current, EPS * (v + A - B * w)]

        run = solve_ivp(field, (0, 20 * row.period), [1.0, 1.0], method="DOP853", rtol=1e-11,
                        atol=1e-12, dense_output=True)
        times = np.linspace(10 * row.period, 20 * row.period, 200001)
        v = run.sol(times)[0]
        up = times[1:][(v[:-1] < 0.0) & (v[1:] >= 0.0)]
        assert np.mean(np.diff(up)) == pytest.approx(row.period, rel=1e-5)
        assert 0.5 * (v.max() - v.min()) == pytest.approx(row.amplitude, rel=1e-4)


@pytest.mark.slow
def test_fitzhugh_nagumo_folds_bound_the_large_cycle_as_scipy_finds_it():
    # reference: scipy's solve_ivp (DOP853) from a point outside the cycle, run long enough to pass
    # the slow passage near a fold: just inside each fold the motion keeps its large cycle, just
    # outside it settles at the (stable) equilibrium, so each fold is bracketed to 1e-3
    from scipy.integrate import solve_ivp

    result = sweep(fitzhugh_nagumo(), "I", 0.0, 1.5, samples=16, workers=1, seconds=240.0)
    assert result.complete, result.reason
    (branch,) = result.branches
    assert branch.end_hopf == 1                     # from Hopf point 1 round to Hopf point 2
    folds = sorted(f.param_value for f in result.folds)
    assert len(folds) == 2 and folds[0] < result.hopf[0].param_value < result.hopf[1].param_value < folds[1]
    assert any(r.stable for r in branch.points) and not branch.points[0].stable
    for fold, inside in ((folds[0], +1.0), (folds[1], -1.0)):
        for offset, running in ((1e-3 * inside, True), (-1e-3 * inside, False)):
            current = fold + offset

            def field(_t, y, current=current):
                v, w = y
                return [v - v**3 / 3 - w + current, EPS * (v + A - B * w)]

            run = solve_ivp(field, (0.0, 6000.0), [2.0, 1.5], method="DOP853", rtol=1e-9, atol=1e-12,
                            dense_output=True)
            v = run.sol(np.linspace(5500.0, 6000.0, 20001))[0]
            assert (0.5 * (v.max() - v.min()) > 1.5) == running, (current, v.max() - v.min())


def test_sweep_text_and_json_show_branches_folds_and_birth(capsys):
    import json

    from orbitfix.verify.cli.main import main

    code = main(["sweep", "vibration_drive", "--param", "mu", "--from", "-1.5", "--to", "0.5",
                 "--samples", "9"])
    out = capsys.readouterr().out
    assert code == 0
    # the Bautin normal form's branch is born unstable (subcritical) and turns at mu = -1 (derived by
    # hand above): never "a small stable cycle grows" over an unstable first row
    assert "born unstable" in out and "fold of cycles at mu = -1" in out
    assert "a small stable cycle grows" not in out
    code = main(["sweep", "vibration_drive", "--param", "mu", "--from", "-1.5", "--to", "0.5",
                 "--samples", "9", "--json"])
    data = json.loads(capsys.readouterr().out)
    assert data["complete"] is True and data["reason"] == ""
    (branch,) = data["branches"]
    assert branch["born_stable"] is False
    assert {"stable", "multipliers", "max_multiplier"} <= set(branch["points"][0])
    (fold,) = data["folds"]
    assert fold["param_value"] == pytest.approx(-1.0, abs=1e-6)
