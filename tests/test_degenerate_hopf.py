"""A vanishing first Lyapunov coefficient is reported as undetermined, never given
a sign, while a genuinely small one keeps its sign: the two side by side.

- Van der Pol, x' = y, y' = mu (1 - x^2) y - x: at mu = 0 the system is the
  linear harmonic oscillator, every orbit is a cycle, so l1 = 0 exactly; for
  small mu > 0 the limit cycle has amplitude close to 2 (Strogatz, Nonlinear
  Dynamics and Chaos, section 7.6, averaging for the van der Pol oscillator:
  r -> 2; from memory), not the r ~ C sqrt(mu) of a soft onset.
- The Hopf normal form x' = mu x - y + s x (x^2 + y^2), y' = x + mu y +
  s y (x^2 + y^2) has l1 = s with the contract's normalization (Kuznetsov,
  Elements of Applied Bifurcation Theory, sections 3.4-3.5); s = -1e-6 and
  -1e-9 are weakly supercritical and must stay so. A variant whose cubic
  coefficient is s + mu moves l1 along the branch (l1 = s at mu = 0), so the
  rounding floor is not zero there and must still not swallow s.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from branchline import scan_from_dict
from branchline.events.normal_forms import L1_ZERO_NOTE
from branchline.runner import run_scan


def _hopf_event(equations: dict[str, str], parameters: dict[str, float]):
    scan = scan_from_dict(
        {
            "model": {"parameters": parameters, "equations": equations},
            "trace": [{"vary": "mu", "interval": [-0.5, 0.5], "start": {"x": 0.0, "y": 0.0}}],
        }
    )
    result = run_scan(scan)
    hopf = [e for e in result.events if e.kind == "hopf"]
    assert len(hopf) == 1
    return result, hopf[0]


VAN_DER_POL = {"x": "y", "y": "mu*(1 - x^2)*y - x"}


def test_van_der_pol_criticality_is_not_determined():
    result, event = _hopf_event(VAN_DER_POL, {"mu": -0.5})
    assert abs(event.value) < 1e-12  # the Hopf point is mu = 0
    assert event.frequency == pytest.approx(1.0, rel=1e-12)
    assert event.criticality is None
    assert L1_ZERO_NOTE in event.note
    assert abs(event.lyapunov) < 1e-12
    assert event.details["normal_form"]["amplitude_coefficient"] is None
    report = result.report()
    assert "soft onset" not in report and "hard onset" not in report
    assert "not determined" in report
    row = result.events_frame().iloc[0]
    assert row["criticality"] == ""


def test_van_der_pol_cycle_is_large_at_once():
    # Why no sign may be given: at mu = 0.05 the cycle's amplitude is about 2
    # (Strogatz, section 7.6), where a soft onset would give a small one.
    mu = 0.05
    done = solve_ivp(
        lambda t, z: [z[1], mu * (1 - z[0] ** 2) * z[1] - z[0]],
        (0.0, 400.0),
        [0.5, 0.0],
        rtol=1e-9,
        atol=1e-12,
        dense_output=True,
    )
    late = done.sol(np.linspace(380.0, 400.0, 4001))[0]
    assert abs(late.max() - 2.0) < 0.01


@pytest.mark.parametrize("s", [-1e-6, -1e-9])
@pytest.mark.parametrize("moving", [False, True], ids=["fixed-cubic", "cubic-moves-with-mu"])
def test_weakly_supercritical_keeps_its_sign(s, moving):
    cubic = "(s + mu)" if moving else "s"
    equations = {
        "x": f"mu*x - y + {cubic}*x*(x^2 + y^2)",
        "y": f"x + mu*y + {cubic}*y*(x^2 + y^2)",
    }
    _, event = _hopf_event(equations, {"mu": -0.5, "s": s})
    assert abs(event.value) < 1e-12
    assert event.lyapunov == pytest.approx(s, rel=1e-12)
    assert event.criticality == "supercritical"
    assert L1_ZERO_NOTE not in event.note
    # r ~ C sqrt(mu) with C = sqrt(alpha' / (omega |l1|)) = sqrt(1 / |s|) (alpha' = 1).
    coefficient = event.details["normal_form"]["amplitude_coefficient"]
    assert coefficient == pytest.approx(1.0 / np.sqrt(-s), rel=1e-12)
