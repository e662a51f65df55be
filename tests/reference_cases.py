"""Reference cases: small models with events known from published sources.

Each :class:`ReferenceCase` is a record (id, source, model, trace, expected
events, the branches switched to at its branch points) that the continuation,
event and switching tests (``test_continuation.py``, ``test_events.py``,
``test_switching.py``) are parametrized over by :data:`COMBINATIONS`: every
case crossed with the dense and sparse linear algebra policies (given to the
model as a parameter, :mod:`branchline.numerics.policy`) and both correctors.
Values are closed forms from the source (computed here with scipy's brentq
where the source gives an equation), never branchline output. Each combination
is traced once per test session (:func:`traced`, :func:`switched`) and shared
by the three files.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np
import pytest
from scipy.optimize import brentq

from branchline.model.build import build_model
from branchline.numerics.policy import DENSE, SPARSE
from branchline.problems.equilibrium_branch import locate_events, trace_branch
from branchline.problems.switching import trace_switched
from branchline.scan.loader import ExpressionModelSpec, StepSettings


@dataclass(frozen=True)
class ExpectedEvent:
    """An event the trace must find: its kind, the varied parameter's exact value,
    and what else the source fixes (frequency, Lyapunov coefficient, branching)."""

    kind: str
    value: float
    frequency: float | None = None
    lyapunov: float | None = None
    branching: str | None = None


@dataclass(frozen=True)
class ReferenceCase:
    """One model, one trace, the events it must find and the children it must switch to.

    ``newton_cap`` is the largest number of corrector iterations any point of the
    trace may take (quadratic convergence from the tangent predictor: two or
    three, common practice; the chord method converges linearly, so its cap is
    larger). ``child_relation(state, parameters)`` is the source's closed form of
    the branches that cross at the branch point (zero on them), or None.
    """

    id: str
    source: str
    equations: dict[str, str]
    parameters: dict[str, float]
    vary: str
    start: dict[str, float]
    interval: tuple[float, float]
    events: tuple[ExpectedEvent, ...]
    children: int = 0  # half-branches switched to at branch points
    newton_cap: int = 3
    chord_cap: int = 5
    child_relation: Callable[[dict, dict], float] | None = None
    value_rtol: float = 1e-10
    notes: dict[str, str] = field(default_factory=dict)


def _budworm_fold_values(k: float) -> tuple[float, float]:
    """r at the two folds for carrying capacity k: r = 2 x^3 / (1 + x^2)^2 where
    k = 2 x^3 / (x^2 - 1) (Strogatz, section 3.7, recalled and re-derived from f = 0,
    df/dx = 0), solved with brentq on either side of the minimum x = sqrt(3)."""

    def k_of(x: float) -> float:
        return 2.0 * x**3 / (x**2 - 1.0) - k

    roots = (
        brentq(k_of, 1.0 + 1e-9, math.sqrt(3.0), xtol=1e-15),
        brentq(k_of, math.sqrt(3.0), 10.0 * k, xtol=1e-15),
    )
    return tuple(sorted(2.0 * x**3 / (1.0 + x**2) ** 2 for x in roots))


_BUDWORM_FOLDS = _budworm_fold_values(20.0)

CASES = (
    ReferenceCase(
        id="logistic_harvest",
        source="logistic growth with constant harvest N' = N (1 - N) - h: the two "
        "equilibria merge at h = 1/4, N = 1/2 (Strogatz, Nonlinear Dynamics and Chaos, "
        "exercise 3.7.3, from memory; elementary)",
        equations={"N": "N*(1 - N) - h"},
        parameters={"h": 0.1},
        vary="h",
        start={"N": 0.9},
        interval=(0.0, 0.4),
        events=(ExpectedEvent("fold", 0.25),),
    ),
    ReferenceCase(
        id="spruce_budworm",
        source="spruce budworm x' = r x (1 - x/k) - x^2/(1 + x^2), k = 20: two folds "
        "(Strogatz, section 3.7; closed form above)",
        equations={"x": "r*x*(1 - x/k) - x^2/(1 + x^2)"},
        parameters={"r": 0.4, "k": 20.0},
        vary="r",
        start={"x": 0.5},
        interval=(0.1, 0.7),
        events=(ExpectedEvent("fold", _BUDWORM_FOLDS[0]), ExpectedEvent("fold", _BUDWORM_FOLDS[1])),
    ),
    ReferenceCase(
        id="hopf_normal_form",
        source="Hopf normal form x' = mu x - y - x r^2, y' = x + mu y - y r^2: Hopf at "
        "mu = 0, omega = 1, l1 = s = -1 with the contract's scaling (Kuznetsov, Elements "
        "of Applied Bifurcation Theory, section 3.5)",
        equations={"x": "mu*x - y - x*(x^2 + y^2)", "y": "x + mu*y - y*(x^2 + y^2)"},
        parameters={"mu": -0.5},
        vary="mu",
        start={"x": 0.0, "y": 0.0},
        interval=(-0.5, 0.5),
        events=(ExpectedEvent("hopf", 0.0, frequency=1.0, lyapunov=-1.0),),
    ),
    ReferenceCase(
        id="brusselator",
        source="Brusselator x' = a - (b + 1) x + x^2 y, y' = b x - x^2 y, a = 1: Hopf at "
        "b = 1 + a^2 = 2 with omega = a (Strogatz, exercise 8.3.1, from memory; "
        "trace and determinant of the Jacobian at (a, b/a))",
        equations={"x": "a - (b + 1)*x + x^2*y", "y": "b*x - x^2*y"},
        parameters={"a": 1.0, "b": 1.0},
        vary="b",
        start={"x": 1.0, "y": 1.0},
        interval=(1.0, 3.0),
        events=(ExpectedEvent("hopf", 2.0, frequency=1.0),),
    ),
    ReferenceCase(
        id="pitchfork",
        source="x' = p x - x^3: the branch x = 0 meets x^2 = p at p = 0, a pitchfork "
        "(Strogatz, section 3.4)",
        equations={"x": "p*x - x^3"},
        parameters={"p": -0.5},
        vary="p",
        start={"x": 0.0},
        interval=(-0.5, 0.5),
        events=(ExpectedEvent("branch_point", 0.0, branching="pitchfork"),),
        children=2,
        child_relation=lambda x, p: x["x"] ** 2 - p["p"],
    ),
    ReferenceCase(
        id="transcritical",
        source="x' = p x - x^2: the branches x = 0 and x = p cross at p = 0, a "
        "transcritical point (Strogatz, section 3.2)",
        equations={"x": "p*x - x^2"},
        parameters={"p": -0.5},
        vary="p",
        start={"x": 0.0},
        interval=(-0.5, 0.5),
        events=(ExpectedEvent("branch_point", 0.0, branching="transcritical"),),
        children=2,
        child_relation=lambda x, p: x["x"] - p["p"],
    ),
    ReferenceCase(
        id="lorenz_origin",
        source="Lorenz system, origin branch: pitchfork at r = 1 onto C+- "
        "(Lorenz 1963; Strogatz, section 9.2)",
        equations={"x": "sigma*(y - x)", "y": "r*x - y - x*z", "z": "x*y - b*z"},
        parameters={"sigma": 10.0, "r": 0.5, "b": 8.0 / 3.0},
        vary="r",
        start={"x": 0.0, "y": 0.0, "z": 0.0},
        interval=(0.0, 10.0),
        events=(ExpectedEvent("branch_point", 1.0, branching="pitchfork"),),
        children=2,
        # C+-: x = y = +-sqrt(b (r - 1)), z = r - 1 (Lorenz 1963; Strogatz, section 9.2)
        child_relation=lambda x, p: (
            abs(x["x"] ** 2 - p["b"] * (p["r"] - 1.0))
            + abs(x["y"] - x["x"])
            + abs(x["z"] - (p["r"] - 1.0))
        ),
    ),
)

POLICIES = {"dense": DENSE, "sparse": SPARSE}
CORRECTORS = ("full", "chord")
# Rejected steps of a whole trace: none is needed on these smooth branches (measured);
# a couple is allowed for step control near events, more means the predictor fails.
MAX_REJECTED_STEPS = 2
BY_ID = {case.id: case for case in CASES}
COMBINATIONS = [
    pytest.param(case, policy, newton, id=f"{case.id}-{policy}-{newton}")
    for case in CASES
    for policy in sorted(POLICIES)
    for newton in CORRECTORS
]


@dataclass(frozen=True)
class Traced:
    """One case traced with one policy and corrector, and the events located on it."""

    model: object
    branch: object
    events: list


@functools.cache
def _traced(case_id: str, policy: str, newton: str) -> Traced:
    case = BY_ID[case_id]
    spec = ExpressionModelSpec(parameters=dict(case.parameters), equations=dict(case.equations))
    model = replace(build_model(spec), linear_algebra=POLICIES[policy])
    x0 = np.array([case.start[name] for name in model.states])
    branch = trace_branch(
        model,
        case.id,
        case.vary,
        model.defaults,
        x0,
        case.interval,
        "both",
        StepSettings(),
        newton=newton,
    )
    return Traced(model, branch, locate_events(model, branch))


def traced(case: ReferenceCase, policy: str, newton: str) -> Traced:
    """The case traced (both directions, default steps) with the policy and corrector."""
    return _traced(case.id, policy, newton)


@functools.cache
def _switched(case_id: str, policy: str, newton: str) -> tuple:
    case = BY_ID[case_id]
    run = _traced(case_id, policy, newton)
    return tuple(
        child
        for event in run.events
        if event.kind == "branch_point"
        for child in trace_switched(run.model, run.branch, event, StepSettings(), case.interval)
    )


def switched(case: ReferenceCase, policy: str, newton: str) -> tuple:
    """The half-branches switched to at every branch point of :func:`traced`."""
    return _switched(case.id, policy, newton)
