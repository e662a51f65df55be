"""The ``[robust_margin]`` section: how far the nominal point lies from every fold and
Hopf boundary when several parameters are uncertain at once.

Keys (ours; the contract is silent):

- ``scale`` (required): ``{ <parameter> = <positive number>, ... }``, at least two
  parameters: the uncertain ones, each with its unit of drift (a standard
  deviation, a tolerance). Distances are measured in these units.
- ``nominal`` (optional): ``{ <parameter> = <value>, ... }``, the operating point;
  any parameter not named keeps its default. Parameters that are not uncertain
  stay at their nominal values, so only fold and Hopf points located where they
  have those values start a search.
- ``ellipse`` (optional, default ``true``): draw the margin ellipse (the scaled
  circle of the nearest distance) on the stability map when its two parameters
  are the uncertain ones.
"""

from __future__ import annotations

from dataclasses import dataclass

from branchline.scan.checks import Checker, key_path, listed, shown, suggestion

MARGIN_KEYS = ("scale", "nominal", "ellipse")


@dataclass(frozen=True)
class RobustMarginSpec:
    """``[robust_margin]``: the uncertain parameters' scales and the nominal point."""

    scales: dict[str, float]  # in the scan's order
    nominal: dict[str, float]  # only the values given (others: defaults)
    ellipse: bool = True


def read_robust_margin(check: Checker, value: object, parameters) -> RobustMarginSpec | None:
    """Validate ``[robust_margin]`` against the model's parameter names."""
    if value is None:
        return None
    path = "robust_margin"
    table = check.table(value, path)
    check.keys(table, path, MARGIN_KEYS)
    if "scale" not in table:
        check.fail(
            f"{path}.scale",
            "missing: give each uncertain parameter's scale, e.g. scale = { D = 0.01, S_in = 0.2 }",
        )
    scales = {}
    for name, number in check.table(table["scale"], f"{path}.scale").items():
        key = key_path(f"{path}.scale", name)
        _known(check, name, key, parameters)
        scale = check.number(number, key)
        if not scale > 0.0:
            check.fail(key, f"must be a positive number (a unit of drift), got {shown(number)}")
        scales[name] = scale
    if len(scales) < 2:
        check.fail(
            f"{path}.scale",
            "needs at least two uncertain parameters (with one, the operating margin of a trace "
            "varying it answers the question)",
        )
    nominal = {}
    for name, number in check.table(table.get("nominal", {}), f"{path}.nominal").items():
        key = key_path(f"{path}.nominal", name)
        _known(check, name, key, parameters)
        nominal[name] = check.number(number, key)
    ellipse = table.get("ellipse", True)
    if not isinstance(ellipse, bool):
        check.fail(f"{path}.ellipse", f"must be true or false, got {shown(ellipse)}")
    return RobustMarginSpec(scales, nominal, ellipse)


def _known(check: Checker, name: str, key: str, parameters) -> None:
    if name not in parameters:
        check.fail(
            key,
            f"'{name}' is not a parameter{suggestion(name, parameters)} "
            f"(parameters: {listed(parameters)})",
        )
