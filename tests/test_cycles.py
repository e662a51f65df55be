"""Periodic orbits: collocation, Floquet multipliers, cycle events, [[cycles]] scans.

References (each named beside its check):
- Hopf normal form x' = mu x - y - x r^2, y' = x + mu y - y r^2: r' = r (mu - r^2),
  theta' = 1, so orbits of radius sqrt(mu), period 2 pi, and nontrivial multiplier
  exp(T d/dr[r (mu - r^2)]) = exp(-4 pi mu) (Kuznetsov, Elements of Applied
  Bifurcation Theory, 3rd ed., section 3.4; Strogatz, Nonlinear Dynamics and Chaos,
  section 8.2).
- Bautin normal form rho' = rho (b1 + b2 rho^2 - rho^4), phi' = 1 (Kuznetsov,
  section 8.3): cycles at b1 + b2 rho^2 - rho^4 = 0, which fold at b1 = -b2^2 / 4,
  rho^2 = b2 / 2; the radial multiplier is exp(2 pi * 2 rho^2 (b2 - 2 rho^2)).
- The van der Pol oscillator x'' - (a - x^2) x' + x = 0 (van der Pol, 1926; Strogatz,
  section 7.5), checked against scipy.integrate.solve_ivp at tight tolerances, and its
  multiplier against the variational equations integrated by solve_ivp and against
  Liouville's formula exp(int trace f_x dt) (Hartman, Ordinary Differential Equations,
  chapter IV; for planar orbits the nontrivial multiplier).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from branchline.errors import ScanError
from branchline.runner import run_scan
from branchline.scan.loader import scan_from_dict

HOPF_NORMAL_FORM = {
    "x": "mu*x - y - x*(x^2 + y^2)",
    "y": "x + mu*y - y*(x^2 + y^2)",
}


def cycles_scan(equations, parameters, vary, interval, start, **cycle_keys):
    data = {
        "model": {"parameters": parameters, "equations": equations},
        "trace": [{"name": "rest", "vary": vary, "interval": interval, "start": start}],
        "cycles": [{"name": "osc", "from": "rest", "interval": interval, **cycle_keys}],
    }
    return scan_from_dict(data)


@pytest.fixture(scope="module")
def hopf_run():
    scan = cycles_scan(
        HOPF_NORMAL_FORM, {"mu": -0.5}, "mu", [-1.0, 1.0], {"x": 0.0, "y": 0.0}, intervals=20
    )
    return run_scan(scan)


def test_hopf_normal_form_orbits(hopf_run):
    family = hopf_run.cycles[0]
    assert family.status == "done" and len(family) > 5
    assert family.orbits[-1].parameter == pytest.approx(1.0, abs=1e-12)  # ends on the edge
    for orbit in family.orbits:
        mu = orbit.parameter
        assert mu > 0  # supercritical: the orbits exist for mu > 0
        # Kuznetsov section 3.4: radius sqrt(mu), period 2 pi, multiplier exp(-4 pi mu)
        assert orbit.period == pytest.approx(2 * math.pi, rel=1e-9)
        assert orbit.maxima == pytest.approx([math.sqrt(mu)] * 2, rel=1e-8)
        assert orbit.minima == pytest.approx([-math.sqrt(mu)] * 2, rel=1e-8)
        assert abs(orbit.nontrivial[0]) == pytest.approx(math.exp(-4 * math.pi * mu), rel=1e-8)
        assert abs(orbit.multipliers[orbit.trivial] - 1.0) < 1e-8
        assert orbit.stable


def test_cycles_table_and_profiles(hopf_run, tmp_path):
    from branchline.results.writers import read_results, write_results

    frame = hopf_run.cycles_frame()
    assert list(frame.columns) == [
        "cycles",
        "step",
        "mu",
        "period",
        "x_min",
        "x_max",
        "y_min",
        "y_max",
        "stable",
        "multiplier",
    ]
    assert frame["multiplier"].to_numpy() == pytest.approx(np.exp(-4 * np.pi * frame["mu"]))
    folder = write_results(hopf_run, tmp_path / "run", figures=False)
    saved = read_results(folder)
    assert saved.cycles is not None and len(saved.cycles) == len(frame)
    profiles = np.load(folder / "cycles.npz")
    orbit = profiles["osc:profiles"][-1]  # mu = 1: the unit circle
    assert np.hypot(orbit[:, 0], orbit[:, 1]) == pytest.approx(1.0, rel=1e-8)
    report = (folder / "report.md").read_text()
    assert "## Oscillations" in report and "onset soft" in report


def test_bautin_cycle_fold_and_multipliers():
    # Kuznetsov section 8.3 with b2 = 1, s = -1: subcritical Hopf at b1 = 0, cycle fold at
    # b1 = -1/4 with rho^2 = 1/2, where both multipliers are 1.
    equations = {
        "x": "b1*x - y + b2*x*(x^2+y^2) - x*(x^2+y^2)^2",
        "y": "x + b1*y + b2*y*(x^2+y^2) - y*(x^2+y^2)^2",
    }
    scan = cycles_scan(
        equations, {"b1": -0.6, "b2": 1.0}, "b1", [-0.6, 0.2], {"x": 0.0, "y": 0.0}, intervals=20
    )
    result = run_scan(scan)
    folds = [e for e in result.events if e.kind == "cycle_fold"]
    assert len(folds) == 1
    fold = folds[0]
    assert fold.value == pytest.approx(-0.25, abs=1e-10)
    assert np.hypot(*fold.state) == pytest.approx(math.sqrt(0.5), rel=1e-8)
    multipliers = np.array([complex(*z) for z in fold.details["multipliers"]])
    assert np.abs(multipliers - 1.0) == pytest.approx([0.0, 0.0], abs=1e-6)
    family = result.cycles[0]
    for orbit in family.orbits:
        rho2 = float(orbit.maxima[0]) ** 2
        expected = math.exp(2 * math.pi * 2 * rho2 * (1.0 - 2 * rho2))
        assert abs(orbit.nontrivial[0]) == pytest.approx(expected, rel=1e-7)
        assert orbit.stable == (rho2 > 0.5)
    assert any(o.stable for o in family.orbits) and not family.orbits[0].stable


VAN_DER_POL = {"x": "y", "y": "(a - x^2)*y - x"}


def _van_der_pol_reference(a: float):
    """Period, extremes and multiplier of the van der Pol orbit at ``a`` by solve_ivp."""

    def field(t, z):
        x, y = z
        return [y, (a - x * x) * y - x]

    def crossing(t, z):
        return z[1]

    crossing.direction = -1.0  # y falls through 0 at the maximum of x
    settle = solve_ivp(field, (0, 200), [2.0, 0.0], rtol=1e-12, atol=1e-12)
    start = solve_ivp(field, (0, 50), settle.y[:, -1], events=crossing, rtol=1e-12, atol=1e-12)
    z0 = start.y_events[0][-1]
    one = solve_ivp(field, (0, 50), z0, events=crossing, rtol=1e-13, atol=1e-13, dense_output=True)
    period = one.t_events[0][1] if one.t_events[0][0] < 1e-9 else one.t_events[0][0]
    times = np.linspace(0, period, 20001)
    ys = one.sol(times)[1]
    i = int(np.argmax(ys))

    def slope(t, z):
        x, y = z
        return (a - x * x) * y - x

    peak = solve_ivp(field, (0, times[i] + 0.5), z0, events=slope, rtol=1e-13, atol=1e-13)
    y_max = max(z[1] for z in peak.y_events[0] if z[1] > 0)

    def variational(t, w):
        x, y = w[:2]
        m = w[2:].reshape(2, 2)
        jac = np.array([[0.0, 1.0], [-2 * x * y - 1.0, a - x * x]])
        return np.concatenate([[y, (a - x * x) * y - x], (jac @ m).ravel()])

    flow = solve_ivp(
        variational, (0, period), np.concatenate([z0, np.eye(2).ravel()]), rtol=1e-13, atol=1e-13
    )
    monodromy = flow.y[2:, -1].reshape(2, 2)
    return period, float(z0[0]), y_max, np.linalg.eigvals(monodromy)


@pytest.fixture(scope="module")
def van_der_pol_family():
    scan = cycles_scan(
        VAN_DER_POL, {"a": -0.5}, "a", [-0.5, 1.2], {"x": 0.0, "y": 0.0}, intervals=40
    )
    return run_scan(scan).cycles[0]


def test_van_der_pol_against_simulation(van_der_pol_family):
    family = van_der_pol_family
    assert family.status == "done"
    orbit = min(family.orbits, key=lambda o: abs(o.parameter - 1.0))
    period, x_max, y_max, multipliers = _van_der_pol_reference(orbit.parameter)
    # solve_ivp at rtol 1e-13 is the reference (the period for a = 1 is 6.6632868593...,
    # a widely tabulated value, from memory)
    assert orbit.period == pytest.approx(period, rel=1e-6)
    assert orbit.maxima[0] == pytest.approx(x_max, rel=1e-6)
    assert orbit.minima[0] == pytest.approx(-x_max, rel=1e-6)  # symmetric orbit
    assert orbit.maxima[1] == pytest.approx(y_max, rel=1e-6)
    ours = np.sort(np.abs(orbit.multipliers))
    assert ours == pytest.approx(np.sort(np.abs(multipliers)), rel=1e-6, abs=1e-9)


def test_van_der_pol_liouville_and_trivial_multiplier(van_der_pol_family):
    from branchline.numerics.collocation import evaluate_periodic

    for orbit in van_der_pol_family.orbits:
        assert abs(orbit.multipliers[orbit.trivial] - 1.0) < 1e-8
        # Liouville: mu = exp(T int_0^1 (a - x^2) ds), by the trapezoid rule on a fine
        # periodic grid (spectrally accurate for periodic integrands)
        s = np.arange(4000) / 4000
        x = evaluate_periodic(orbit.mesh, 4, orbit.values, s)[:, 0]
        expected = math.exp(orbit.period * float(np.mean(orbit.parameter - x * x)))
        assert abs(orbit.nontrivial[0]) == pytest.approx(expected, rel=1e-6)


def test_strongly_stable_orbit_keeps_its_other_multipliers():
    # The Hopf normal form with a fast decaying third state z' = -lam z: multipliers 1,
    # exp(-4 pi mu) and exp(-2 pi lam) = 1e-10 for lam = 10 ln(10) / (2 pi).
    lam = 10 * math.log(10) / (2 * math.pi)
    equations = {**HOPF_NORMAL_FORM, "z": "-lam*z"}
    scan = cycles_scan(
        equations,
        {"mu": -0.5, "lam": lam},
        "mu",
        [-1.0, 0.6],
        {"x": 0.0, "y": 0.0, "z": 0.0},
        intervals=20,
    )
    family = run_scan(scan).cycles[0]
    assert family.status == "done"
    for orbit in family.orbits:
        mu = orbit.parameter
        moduli = np.sort(np.abs(orbit.nontrivial))
        assert moduli[1] == pytest.approx(math.exp(-4 * math.pi * mu), rel=1e-8)
        assert moduli[0] == pytest.approx(1e-10, rel=1e-3)
        assert abs(orbit.multipliers[orbit.trivial] - 1.0) < 1e-8


@pytest.mark.parametrize(
    ("change", "key", "words"),
    [
        ({"from": "nowhere"}, "cycles[1].from", "not a trace"),
        ({"points": 9}, "cycles[1].points", "from 2 to 7"),
        ({"name": "a.b"}, "cycles[1].name", "without '.'"),
        ({"name": "rest"}, "cycles[1].name", "already used"),
        ({"interval": [1.0, 0.0]}, "cycles[1].interval", "reversed"),
        ({"intervals": 2}, "cycles[1].intervals", "at least 4"),
        ({"doublings": -1}, "cycles[1].doublings", "positive whole number"),
        ({"steps": {"largst": 1}}, "cycles[1].steps.largst", "did you mean 'largest'"),
        ({"colour": 1}, "cycles[1].colour", "unknown key"),
    ],
)
def test_cycles_section_errors_name_file_and_key(change, key, words):
    data = {
        "model": {"parameters": {"mu": -0.5}, "equations": HOPF_NORMAL_FORM},
        "trace": [{"name": "rest", "vary": "mu", "interval": [-1, 1], "start": {"x": 0, "y": 0}}],
        "cycles": [{"name": "osc", "from": "rest", "interval": [-1, 1], **change}],
    }
    with pytest.raises(ScanError) as info:
        scan_from_dict(data, "plant.toml")
    assert info.value.key == key
    assert str(info.value).startswith(f"plant.toml: {key}: ") and words in str(info.value)


def test_missing_hopf_point_fails_gracefully():
    scan = cycles_scan({"x": "mu - x"}, {"mu": 0.0}, "mu", [-1.0, 1.0], {"x": 0.0})
    result = run_scan(scan)
    assert result.status == "failed"
    assert "0 located Hopf point" in result.cycles[0].message


ROESSLER = {"x": "-y - z", "y": "x + a*y", "z": "b + z*(x - c)"}


def _roessler_returns(a: float, start, settle: float = 300.0, span: float = 200.0):
    """Times and values of the maxima of x on the attractor at ``a`` (b = 2, c = 4), by
    solve_ivp at tight tolerances after a transient of ``settle`` time units."""

    def field(t, z):
        x, y, w = z
        return [-y - w, x + a * y, 2.0 + w * (x - 4.0)]

    def x_peak(t, z):
        return -z[1] - z[2]

    x_peak.direction = -1.0
    first = solve_ivp(field, (0, settle), start, rtol=1e-11, atol=1e-11)
    run = solve_ivp(field, (0, span), first.y[:, -1], events=x_peak, rtol=1e-12, atol=1e-12)
    return run.t_events[0], run.y_events[0][:, 0]


@pytest.fixture(scope="module")
def roessler_run():
    # Roessler, "An equation for continuous chaos", Phys. Lett. A 57 (1976), with b = 2,
    # c = 4 and a varied: the orbit born at the Hopf point of the inner equilibrium
    # doubles its period before chaos (the cascade; Kuznetsov, Elements of Applied
    # Bifurcation Theory, section 10.3 discusses this model family; the doubling's
    # value here is confirmed by simulation below, not taken from a table).
    a0 = 0.05
    x0 = (4.0 - math.sqrt(16.0 - 8.0 * a0)) / 2.0
    scan = cycles_scan(
        ROESSLER,
        {"a": a0, "b": 2.0, "c": 4.0},
        "a",
        [0.0, 0.36],
        {"x": x0, "y": -x0 / a0, "z": x0 / a0},
        intervals=30,
    )
    return run_scan(scan)


def test_roessler_period_doubling_confirmed_by_simulation(roessler_run):
    doublings = [e for e in roessler_run.events if e.kind == "period_doubling"]
    assert [e.trace for e in doublings][:1] == ["osc"]
    value = doublings[0].value
    multipliers = [complex(*z) for z in doublings[0].details["multipliers"]]
    assert min(abs(z + 1.0) for z in multipliers) < 1e-6
    single, doubled = roessler_run.cycles[0], roessler_run.cycles[1]
    assert doubled.name == "osc.2" and doubled.parent == "osc" and len(doubled) > 3
    # Before the doubling: one maximum of x per turn, the single family's period.
    before = min(single.orbits, key=lambda o: abs(o.parameter - (value - 0.01)))
    assert before.parameter < value and before.stable
    start = before.values[0]
    times, peaks = _roessler_returns(before.parameter, start)
    assert np.ptp(peaks) < 1e-6 * abs(peaks).max()
    assert np.mean(np.diff(times)) == pytest.approx(before.period, rel=1e-6)
    # After it, on the side the doubled family lies: two alternating maxima, and the
    # simulated orbit's period (every second maximum) is the doubled family's period.
    after = [o for o in doubled.orbits if o.parameter > value + 0.005 and o.stable]
    assert after, "the doubled family exists beyond the doubling"
    orbit = after[0]
    times, peaks = _roessler_returns(orbit.parameter, orbit.values[0])
    assert abs(peaks[0] - peaks[1]) > 1e-3 * abs(peaks[0])
    assert peaks[::2] == pytest.approx(np.full(peaks[::2].shape, peaks[0]), rel=1e-6)
    assert np.mean(np.diff(times[::2])) == pytest.approx(orbit.period, rel=1e-6)
    assert orbit.maxima[0] == pytest.approx(peaks.max(), rel=1e-6)


def test_homoclinic_approach_on_a_saddle_node_on_the_orbit():
    # Our variant of Strogatz's infinite-period bifurcation (Nonlinear Dynamics and Chaos,
    # section 8.4: r' = r (1 - r^2), theta' = mu - sin theta): here r' = r (a - r^2),
    # theta' = 1 - r sin theta. The orbit is the circle r = sqrt(a), of period
    # int dtheta / (1 - sqrt(a) sin theta) = 2 pi / sqrt(1 - a), which diverges as a -> 1,
    # where a saddle-node appears on the orbit at (0, 1).
    equations = {
        "x": "x*(a - x^2 - y^2) - y*(1 - y)",
        "y": "y*(a - x^2 - y^2) + x*(1 - y)",
    }
    scan = cycles_scan(equations, {"a": -0.5}, "a", [-0.5, 1.5], {"x": 0.0, "y": 0.0}, intervals=40)
    result = run_scan(scan)
    family = result.cycles[0]
    assert family.status == "homoclinic" and result.status == "done"
    assert "period grows without bound" in family.message
    assert "x=-0.000" in family.message or "x=0.000" in family.message
    assert "y=0.99" in family.message and "saddle-node" in family.message
    last = family.orbits[-1]
    assert 0.98 < last.parameter < 1.0
    assert last.period > 9 * 2 * math.pi
    for orbit in family.orbits:
        a = orbit.parameter
        assert orbit.period == pytest.approx(2 * math.pi / math.sqrt(1 - a), rel=1e-8)
        assert orbit.maxima[0] == pytest.approx(math.sqrt(a), rel=1e-6)


def _ring_family(w: float):
    """The family of orbits r = 1, z = 0 of the ring model below, followed in al."""
    from branchline.model.build import build_model
    from branchline.numerics.collocation import representation_times
    from branchline.problems.cycle_family import family_record, follow_family
    from branchline.problems.cycles import PeriodicOrbitProblem
    from branchline.scan.loader import StepSettings

    equations = {
        "x": "-y + 0.5*x*(al*(x^2 + y^2 - 1) - w*z)",
        "y": "x + 0.5*y*(al*(x^2 + y^2 - 1) - w*z)",
        "z": "w*(x^2 + y^2 - 1) + al*z",
    }
    scan = cycles_scan(
        equations, {"al": -0.2, "w": w}, "al", [-0.2, 0.2], {"x": 0.0, "y": 0.0, "z": 0.0}
    )
    model = build_model(scan.model)
    mesh = np.linspace(0.0, 1.0, 21)
    s = representation_times(mesh, 4)
    values = np.column_stack([np.cos(2 * np.pi * s), np.sin(2 * np.pi * s), 0 * s])
    problem = PeriodicOrbitProblem(model, 0, model.defaults, mesh, 4, values)
    u0 = problem.pack(values, 2 * np.pi, -0.2)
    tangent = np.zeros_like(u0)
    tangent[-1] = 1.0
    steps = StepSettings(initial=0.02, smallest=1e-8, largest=0.05, max_points=100)
    curve, status, message = follow_family(problem, u0, tangent, steps, (-0.2, 0.2))
    family = family_record("ring", "al", model.defaults, curve, 4, (-0.2, 0.2), status, message)
    assert status == "done"
    return model, family


def test_torus_located_with_its_angle():
    # An orbit r = 1, z = 0 of period 2 pi for every al, whose transverse linearization in
    # (u, z), u = x^2 + y^2 - 1, is [[al, -w], [w, al]]: multipliers 1 and
    # exp(2 pi (al +- i w)) (Floquet's theorem for a constant-coefficient linearization;
    # Hartman, Ordinary Differential Equations, chapter IV). A complex pair crosses the
    # unit circle at al = 0, at angle 2 pi w: a torus (Neimark-Sacker) point (Kuznetsov,
    # Elements of Applied Bifurcation Theory, section 7.3 for maps; from memory).
    from branchline.events.cycle_events import locate_cycle_events

    w = 0.3
    model, family = _ring_family(w)
    events = locate_cycle_events(model, family, family.test_values)
    assert [e.kind for e in events] == ["torus"]
    assert events[0].value == pytest.approx(0.0, abs=1e-10)
    assert events[0].details["angle"] == pytest.approx(2 * np.pi * w, rel=1e-8)
    assert "angle" in events[0].note


def test_an_event_whose_multipliers_fail_is_named_not_dropped(monkeypatch):
    # The torus of the ring above, with the Floquet multipliers failing inside its bracket
    # (as Arnoldi may on a large model): no event, and a sentence that says where and why.
    from branchline.events import cycle_events
    from branchline.numerics.floquet import FloquetFailed

    model, family = _ring_family(0.3)

    def fail(*args, **kwargs):
        raise FloquetFailed("Arnoldi did not converge on the monodromy matrix")

    monkeypatch.setattr(cycle_events, "refine", fail)
    missed: list[str] = []
    assert cycle_events.locate_cycle_events(model, family, family.test_values, missed) == []
    assert len(missed) == 1
    text = missed[0]
    assert "cycles ring" in text and "torus" in text and "was not located" in text
    assert "Arnoldi did not converge" in text
    low, high = (float(v) for v in text.split("(al ")[1].split(")")[0].split(" to "))
    assert low < 0.0 < high  # the bracket holds the crossing at al = 0


def test_collocation_jacobian_matches_central_differences():
    # The assembled sparse Jacobian against central differences of the residual (a
    # generic check of the assembly; Nocedal and Wright, Numerical Optimization,
    # section 8.1 for the difference step), at a point off the solution set.
    from branchline.model.build import build_model
    from branchline.numerics.collocation import representation_times
    from branchline.problems.cycles import PeriodicOrbitProblem

    scan = cycles_scan(VAN_DER_POL, {"a": 0.7}, "a", [0.0, 1.0], {"x": 0.0, "y": 0.0})
    model = build_model(scan.model)
    mesh = np.sort(np.concatenate([[0.0, 1.0], np.random.default_rng(1).uniform(0, 1, 7)]))
    s = representation_times(mesh, 3)
    values = np.column_stack([2 * np.cos(2 * np.pi * s), np.sin(2 * np.pi * s) + 0.3 * s])
    problem = PeriodicOrbitProblem(model, 0, model.defaults, mesh, 3, values)
    u = problem.pack(values * 1.1, 6.5, 0.8)
    jac = problem.jacobian(u).toarray()
    step = 1e-6
    for column in range(u.size):
        e = np.zeros_like(u)
        e[column] = step
        difference = (problem.residual(u + e) - problem.residual(u - e)) / (2 * step)
        assert jac[:, column] == pytest.approx(difference, rel=1e-6, abs=1e-7)
    dense = PeriodicOrbitProblem(model, 0, model.defaults, mesh, 3, values, dense=True)
    assert dense.jacobian(u) == pytest.approx(jac, abs=0)


def test_diagram_draws_envelope_and_period_panel(hopf_run):
    figure = hopf_run.figure()
    top, periods, _ = figure.axes[:3]
    envelope = [line for line in top.lines if str(line.get_gid()).startswith("cycles-osc")]
    assert {str(line.get_gid()).rsplit("-", 1)[1] for line in envelope} == {"min", "max"}
    maxima = np.concatenate(
        [line.get_ydata() for line in envelope if line.get_gid().endswith("max")]
    )
    assert maxima.max() == pytest.approx(1.0, rel=1e-8)  # radius sqrt(mu) at mu = 1
    drawn = np.concatenate([line.get_ydata() for line in periods.lines if line.get_gid()])
    assert drawn == pytest.approx(2 * np.pi, rel=1e-9)
    assert "period" in periods.get_ylabel()
