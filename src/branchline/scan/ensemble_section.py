"""The ``[ensemble]`` section of a scan: run the scan for many parameter sets.

Either a grid (``grid = { K = [1, 2], r = { from = 0.1, to = 0.5, count = 5 } }``:
every combination, the first key varying slowest) or random members
(``samples = 500``, ``seed = 7``, ``draw = { K = { normal = [0.5, 0.05] } }``).
Validated here; turning it into members is :mod:`branchline.batch.plan`'s job.

Rules:

- An ensemble parameter is a model parameter that no trace varies or fixes in
  its ``set`` (a member's value would otherwise be overridden or move the
  trace's start value).
- A law is exactly one of ``uniform = [low, high]``, ``normal = [mean, sd]``,
  ``lognormal = [m, s]`` (the parameter's natural logarithm is normal with
  mean m and standard deviation s); ``within = [low, high]`` truncates it
  (a uniform law's own window is already its support).
- ``sampling`` is ``"random"`` (default), ``"latin_hypercube"`` or ``"sobol"``
  (scipy.stats.qmc; scrambled); every method is seeded (``seed``, default 0),
  so a scan file always gives the same members.
- ``margin_threshold`` (in the units of each trace's varied parameter) asks the
  batch report for the probability that the operating margin is below it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from branchline.scan.checks import Checker, key_path, listed, shown, suggestion

# Samples are always seeded: the same scan file gives the same members, which
# is what lets --resume check and continue a batch. Change `seed` for new draws.
DEFAULT_SEED = 0
ENSEMBLE_KEYS = ("grid", "samples", "seed", "draw", "sampling", "margin_threshold")
RANGE_KEYS = ("from", "to", "count")
DRAW_KEYS = ("uniform", "normal", "lognormal", "within")
LAWS = ("uniform", "normal", "lognormal")
SAMPLING_METHODS = ("random", "latin_hypercube", "sobol")
# A batch beyond this many members is almost surely a typo (a grid with a
# count of 10000 on three axes); refusing it early beats filling a disk.
MAX_MEMBERS = 1_000_000
# A truncation window holding less probability than this leaves inverse-transform
# sampling to the last few floating-point values of the CDF: refused as a mistake.
MIN_TRUNCATED_MASS = 1e-9


@dataclass(frozen=True)
class Draw:
    """How one uncertain parameter is sampled.

    ``law`` is "uniform" (``a``, ``b`` the window), "normal" (mean ``a``,
    standard deviation ``b``) or "lognormal" (log is normal(``a``, ``b``));
    ``within`` truncates the law to ``[low, high]``.
    """

    name: str
    law: str
    a: float
    b: float
    within: tuple[float, float] | None = None


@dataclass(frozen=True)
class EnsembleSpec:
    """A validated ``[ensemble]``: a grid, or ``samples`` random members."""

    grid: tuple[tuple[str, tuple[float, ...]], ...] = ()
    samples: int = 0
    seed: int = 0
    draws: tuple[Draw, ...] = ()
    sampling: str = "random"
    margin_threshold: float | None = None

    @property
    def parameters(self) -> tuple[str, ...]:
        """The ensemble's parameter names, in the order of the scan file."""
        if self.grid:
            return tuple(name for name, _ in self.grid)
        return tuple(draw.name for draw in self.draws)

    @property
    def size(self) -> int:
        """Number of members."""
        if self.grid:
            return math.prod(len(values) for _, values in self.grid)
        return self.samples


def read_ensemble(
    check: Checker, value: object, parameters: dict[str, float], fixed: dict[str, str]
) -> EnsembleSpec:
    """The validated ``[ensemble]`` section.

    Parameters
    ----------
    check : Checker
        Raises ScanError for the scan file.
    value : object
        The section as parsed from TOML.
    parameters : dict
        The model's parameters (name -> default).
    fixed : dict
        Parameter name -> the trace key that varies or sets it
        (``trace[1].vary``); these cannot be ensemble parameters.
    """
    table = check.table(value, "ensemble", "a table (grid = ... or samples = ...)")
    check.keys(table, "ensemble", ENSEMBLE_KEYS)
    if ("grid" in table) == ("samples" in table):
        check.fail("ensemble", "give either grid = {...} or samples = N (with draw = {...})")
    threshold = None
    if "margin_threshold" in table:
        threshold = check.number(table["margin_threshold"], "ensemble.margin_threshold")
        if threshold <= 0:
            check.fail("ensemble.margin_threshold", f"must be positive, got {threshold:g}")
    if "grid" in table:
        for key in ("seed", "draw", "sampling"):
            if key in table:
                check.fail(f"ensemble.{key}", "belongs to samples = N, not to a grid")
        grid = _grid(check, table["grid"], parameters, fixed)
        spec = EnsembleSpec(grid=grid, margin_threshold=threshold)
    else:
        spec = _samples(check, table, parameters, fixed, threshold)
    if spec.size > MAX_MEMBERS:
        check.fail("ensemble", f"{spec.size} members is more than {MAX_MEMBERS}")
    return spec


def _parameter(
    check: Checker, name: object, key: str, parameters: dict[str, float], fixed: dict[str, str]
) -> str:
    name = str(name)
    if name not in parameters:
        check.fail(
            key,
            f"'{name}' is not a parameter{suggestion(name, parameters)} "
            f"(parameters: {listed(parameters)})",
        )
    if name in fixed:
        check.fail(
            key,
            f"'{name}' is set by {fixed[name]}; an ensemble parameter must keep the "
            "model's value in every trace",
        )
    return name


def _grid(
    check: Checker, value: object, parameters: dict[str, float], fixed: dict[str, str]
) -> tuple[tuple[str, tuple[float, ...]], ...]:
    table = check.table(
        value, "ensemble.grid", "a table: parameter = [values] or {from, to, count}"
    )
    if not table:
        check.fail("ensemble.grid", "is empty: name at least one parameter")
    axes = []
    for name, entry in table.items():
        key = key_path("ensemble.grid", name)
        name = _parameter(check, name, key, parameters, fixed)
        axes.append((name, _axis(check, entry, key)))
    return tuple(axes)


def _axis(check: Checker, entry: object, key: str) -> tuple[float, ...]:
    if isinstance(entry, list):
        if not entry:
            check.fail(key, "is an empty list")
        values = tuple(check.number(v, f"{key}[{i}]") for i, v in enumerate(entry, start=1))
        if len(set(values)) != len(values):
            check.fail(key, "lists a value twice")
        return values
    table = check.table(entry, key, "a list of values or { from = a, to = b, count = n }")
    check.keys(table, key, RANGE_KEYS)
    for needed in RANGE_KEYS:
        if needed not in table:
            check.fail(key_path(key, needed), "missing: a range needs from, to and count")
    low = check.number(table["from"], f"{key}.from")
    high = check.number(table["to"], f"{key}.to")
    count = check.count(table["count"], f"{key}.count")
    if count == 1:
        if low != high:
            check.fail(f"{key}.count", "a single value needs from = to")
        return (low,)
    if low == high:
        check.fail(key, f"from = to = {low:g} with count = {count}: the values would repeat")
    step = (high - low) / (count - 1)
    # Both ends exact: the last value is `to` itself, not low + (count-1)*step.
    return (*(low + i * step for i in range(count - 1)), high)


def _samples(
    check: Checker,
    table: dict,
    parameters: dict[str, float],
    fixed: dict[str, str],
    threshold: float | None,
) -> EnsembleSpec:
    samples = check.count(table["samples"], "ensemble.samples")
    seed = DEFAULT_SEED
    if "seed" in table:
        seed = table["seed"]
        if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
            check.fail("ensemble.seed", f"must be a whole number >= 0, got {shown(seed)}")
    sampling = table.get("sampling", "random")
    if sampling not in SAMPLING_METHODS:
        check.fail(
            "ensemble.sampling",
            f"must be one of {', '.join(SAMPLING_METHODS)}, got {shown(sampling)}",
        )
    if "draw" not in table:
        check.fail("ensemble.draw", "missing: say how each uncertain parameter is drawn")
    draws_table = check.table(table["draw"], "ensemble.draw")
    if not draws_table:
        check.fail("ensemble.draw", "is empty: name at least one parameter")
    draws = tuple(
        _draw(check, entry, key_path("ensemble.draw", name), name, parameters, fixed)
        for name, entry in draws_table.items()
    )
    return EnsembleSpec(
        samples=samples, seed=seed, draws=draws, sampling=sampling, margin_threshold=threshold
    )


def _pair(check: Checker, value: object, key: str, what: str) -> tuple[float, float]:
    if not isinstance(value, list) or len(value) != 2:
        check.fail(key, f"must be two numbers [{what}], got {shown(value)}")
    return check.number(value[0], f"{key}[1]"), check.number(value[1], f"{key}[2]")


_LAW_ARGUMENTS = {"uniform": "low, high", "normal": "mean, sd", "lognormal": "m, s of the log"}


def _draw(
    check: Checker,
    entry: object,
    key: str,
    name: object,
    parameters: dict[str, float],
    fixed: dict[str, str],
) -> Draw:
    name = _parameter(check, name, key, parameters, fixed)
    table = check.table(entry, key, "a table such as { normal = [mean, sd] }")
    check.keys(table, key, DRAW_KEYS)
    laws = [law for law in LAWS if law in table]
    if len(laws) != 1:
        check.fail(key, f"give exactly one law: {', '.join(LAWS)}")
    law = laws[0]
    a, b = _pair(check, table[law], f"{key}.{law}", _LAW_ARGUMENTS[law])
    if law == "uniform" and not a < b:
        check.fail(f"{key}.uniform", f"needs low < high, got [{a:g}, {b:g}]")
    if law != "uniform" and b <= 0:
        check.fail(f"{key}.{law}", f"the spread must be positive, got {b:g}")
    within = None
    if "within" in table:
        if law == "uniform":
            check.fail(f"{key}.within", "a uniform law is already confined to [low, high]")
        within = _pair(check, table["within"], f"{key}.within", "low, high")
        if not within[0] < within[1]:
            check.fail(f"{key}.within", f"needs low < high, got [{within[0]:g}, {within[1]:g}]")
        if law == "lognormal" and within[1] <= 0:
            check.fail(f"{key}.within", "a lognormal parameter is positive: high must be > 0")
        if _mass(law, a, b, within) < MIN_TRUNCATED_MASS:
            check.fail(f"{key}.within", f"holds almost none of the {law} law's probability")
    return Draw(name=name, law=law, a=a, b=b, within=within)


def _mass(law: str, a: float, b: float, within: tuple[float, float]) -> float:
    """Probability the (normal or lognormal) law gives to ``within``."""
    low, high = within
    if law == "lognormal":
        low, high = (math.log(low) if low > 0 else -math.inf), math.log(high)

    def phi(z: float) -> float:
        return 0.5 * math.erfc(-z / math.sqrt(2.0))

    return phi((high - a) / b) - phi((low - a) / b)


__all__ = ["Draw", "EnsembleSpec", "read_ensemble"]
