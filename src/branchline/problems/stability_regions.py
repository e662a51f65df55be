"""The stability map's regions: the plane of two parameters cut by the boundary curves,
each region labelled by equilibria counted at sample points inside it.

Geometry (pure, also used to draw): the window is rasterized, the followed
boundary curves are drawn into the raster, and the 4-connected components of
the rest are the regions (:func:`region_raster`). Measurement: at up to
``SAMPLES_PER_REGION`` points of each region, spread over it (the most interior
pixel first, then each next the farthest from those taken), every equilibrium in
a state box is found by deflated Newton from a Sobol sample
(:func:`branchline.problems.deflation.find_equilibria`) and classified by the
eigenvalues of its Jacobian. A region whose samples disagree (a boundary that
was not followed runs through it, or a curve ends inside it) says so instead of
carrying one label. The labels are measured, never inferred from the curves;
equilibria outside the box are not counted.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from branchline.numerics.eigenvalues import dense_eigenvalues
from branchline.problems.deflation import Box, find_equilibria, sobol_starts

Array = np.ndarray

# Raster cells along each parameter: fine enough to separate curves 1% of the
# window apart, coarse enough that labelling is instant.
RESOLUTION = 200
# Components smaller than this share of the window are slivers between close curves.
SMALLEST_REGION_SHARE = 4e-4
# Sample points measured per region (their counts must agree for a single label).
SAMPLES_PER_REGION = 3
# Sobol starts of the equilibrium search at each sample point.
SEARCH_STARTS = 16
SEARCH_SEED = 0
# Without a search_box, the state box spans the states seen on the traces and
# boundaries, widened by this share of their range on each side.
BOX_WIDENING = 0.5
# Models larger than this get no stability map (a search at many points is too costly).
MAX_MAP_STATES = 50
# An eigenvalue counts as unstable above this real part (relative to the Jacobian's size).
UNSTABLE_RTOL = 1e-9


@dataclass(frozen=True)
class Sample:
    """Equilibria counted at one parameter point: ``unstable`` holds, per equilibrium
    found, its number of eigenvalues with positive real part (sorted)."""

    first: float
    second: float
    unstable: tuple[int, ...]

    @property
    def equilibria(self) -> int:
        return len(self.unstable)

    @property
    def stable(self) -> int:
        return sum(1 for count in self.unstable if count == 0)


@dataclass(frozen=True)
class Region:
    """One region of the map: its raster label, area share and measured samples."""

    label: int
    share: float
    samples: tuple[Sample, ...]

    @property
    def uniform(self) -> bool:
        """True when every sample found the same equilibria (same unstable counts)."""
        return len({s.unstable for s in self.samples}) == 1


@dataclass(frozen=True)
class StabilityMap:
    """The regions of the plane of ``first`` x ``second`` inside ``window``.

    ``boundaries`` names the curves drawn; ``parameters`` (m,) the other parameters'
    values; ``box`` the state box searched, as (low, high) lists.
    """

    first: str
    second: str
    window: tuple[tuple[float, float], tuple[float, float]]
    boundaries: tuple[str, ...]
    parameters: Array
    regions: tuple[Region, ...]
    box: tuple[list[float], list[float]]
    resolution: int = RESOLUTION
    labels: Array | None = None  # the raster of region labels (0 on the curves)

    def region_at(self, first: float, second: float) -> Region | None:
        """The region holding the point (None on a curve or outside the window)."""
        (lo1, hi1), (lo2, hi2) = self.window
        col = int(np.floor((first - lo1) / (hi1 - lo1) * self.resolution))
        row = int(np.floor((second - lo2) / (hi2 - lo2) * self.resolution))
        if self.labels is None or not (0 <= row < self.resolution and 0 <= col < self.resolution):
            return None
        label = int(self.labels[row, col])
        return next((r for r in self.regions if r.label == label), None)


def region_raster(curves, window, resolution: int = RESOLUTION) -> Array:
    """Region labels of the window's raster, shape (resolution, resolution): 0 on the
    curves (and on slivers), 1, 2, ... for the regions (4-connected).

    Parameters
    ----------
    curves : list of (first values (k,), second values (k,))
    window : ((lo1, hi1), (lo2, hi2))

    Row i of the raster is the second parameter's i-th cell from ``lo2``, column j the
    first parameter's j-th cell from ``lo1``.
    """
    from scipy import ndimage

    blocked = np.zeros((resolution, resolution), dtype=bool)
    (lo1, hi1), (lo2, hi2) = window
    for first, second in curves:
        cols = (np.asarray(first, dtype=float) - lo1) / (hi1 - lo1) * resolution
        rows = (np.asarray(second, dtype=float) - lo2) / (hi2 - lo2) * resolution
        for c0, r0, c1, r1 in zip(cols[:-1], rows[:-1], cols[1:], rows[1:], strict=True):
            pieces = int(np.ceil(3.0 * max(abs(c1 - c0), abs(r1 - r0)))) + 1
            t = np.linspace(0.0, 1.0, pieces + 1)
            c = np.floor(c0 + t * (c1 - c0)).astype(int)
            r = np.floor(r0 + t * (r1 - r0)).astype(int)
            inside = (c >= 0) & (c < resolution) & (r >= 0) & (r < resolution)
            blocked[r[inside], c[inside]] = True
    blocked = ndimage.binary_dilation(blocked)
    labels, count = ndimage.label(~blocked)
    sizes = np.bincount(labels.ravel(), minlength=count + 1)
    smallest = SMALLEST_REGION_SHARE * resolution * resolution
    for label in range(1, count + 1):
        if sizes[label] < smallest:
            labels[labels == label] = 0
    _, dense = np.unique(labels, return_inverse=True)
    dense = dense.reshape(labels.shape)
    return dense if labels.min() == 0 else dense + 1


def cell_centre(window, resolution: int, row: int, col: int) -> tuple[float, float]:
    """The parameter values (first, second) at the centre of raster cell (row, col)."""
    (lo1, hi1), (lo2, hi2) = window
    return (
        lo1 + (col + 0.5) * (hi1 - lo1) / resolution,
        lo2 + (row + 0.5) * (hi2 - lo2) / resolution,
    )


def sample_cells(mask: Array, count: int) -> list[tuple[int, int]]:
    """Up to ``count`` cells of ``mask`` spread over it: the most interior one, then each
    next the farthest from those taken (among cells at least two cells from the edge
    when there are such)."""
    from scipy import ndimage

    # padded: the window's edge counts as the region's edge
    depth = ndimage.distance_transform_edt(np.pad(mask, 1))[1:-1, 1:-1]
    candidates = np.argwhere(depth >= min(2.0, depth.max()))
    first = np.unravel_index(int(np.argmax(depth)), depth.shape)
    chosen = [(int(first[0]), int(first[1]))]
    gap = np.hypot(candidates[:, 0] - first[0], candidates[:, 1] - first[1])
    while len(chosen) < count and gap.max() > 2.0:
        at = int(np.argmax(gap))
        chosen.append((int(candidates[at, 0]), int(candidates[at, 1])))
        gap = np.minimum(
            gap, np.hypot(candidates[:, 0] - chosen[-1][0], candidates[:, 1] - chosen[-1][1])
        )
    return chosen


def measure(model, p: Array, box: Box) -> tuple[int, ...]:
    """Unstable-eigenvalue counts of every equilibrium found in ``box`` at p, sorted."""
    found = find_equilibria(model, p, box, sobol_starts(box, SEARCH_STARTS, SEARCH_SEED))
    counts = []
    for root in found.roots:
        matrix = model.jacobian(root, p)
        matrix = matrix.toarray() if hasattr(matrix, "toarray") else np.asarray(matrix)
        values = dense_eigenvalues(matrix)
        size = max(1.0, float(np.max(np.abs(matrix))))
        counts.append(int(np.sum(values.real > UNSTABLE_RTOL * size)))
    return tuple(sorted(counts))


def state_box(model, states: list[Array], search_box: Box | None = None) -> Box:
    """The search box: the traces' own ``search_box`` when given, else the states seen
    (rows of ``states`` arrays) widened by ``BOX_WIDENING`` of their range each side."""
    if search_box is not None:
        return search_box
    seen = np.vstack([np.asarray(s, dtype=float).reshape(-1, len(model.states)) for s in states])
    low, high = np.nanmin(seen, axis=0), np.nanmax(seen, axis=0)
    spread = np.maximum(high - low, 1e-3 * (1.0 + np.abs(high) + np.abs(low)))
    return Box(low - BOX_WIDENING * spread, high + BOX_WIDENING * spread)


def stability_map(model, boundaries, window, box: Box) -> StabilityMap:
    """Measure the regions cut by ``boundaries`` (one parameter pair) inside ``window``.

    Parameters
    ----------
    model : branchline.model.build.Model
    boundaries : list of Boundary
        Curves in the same (first, second) plane with the same other parameters.
    window : ((lo1, hi1), (lo2, hi2))
    box : Box
        The state box searched for equilibria.
    """
    reference = boundaries[0]
    first_index = model.parameter_index(reference.first)
    second_index = model.parameter_index(reference.second)
    curves = [(b.first_values, b.second_values) for b in boundaries if len(b)]
    labels = region_raster(curves, window)
    regions = []
    total = float(labels.size)
    for label in range(1, int(labels.max()) + 1):
        mask = labels == label
        samples = []
        for row, col in sample_cells(mask, SAMPLES_PER_REGION):
            first, second = cell_centre(window, RESOLUTION, row, col)
            p = np.array(reference.parameters, dtype=float)
            p[first_index], p[second_index] = first, second
            with np.errstate(all="ignore"):
                samples.append(Sample(first, second, measure(model, p, box)))
        regions.append(Region(label, float(mask.sum()) / total, tuple(samples)))
    return StabilityMap(
        first=reference.first,
        second=reference.second,
        window=(tuple(window[0]), tuple(window[1])),
        boundaries=tuple(b.name for b in boundaries),
        parameters=np.array(reference.parameters, dtype=float),
        regions=tuple(regions),
        box=(box.low.tolist(), box.high.tolist()),
        labels=labels,
    )


def stability_maps(model, scan, boundaries, branches) -> tuple[StabilityMap, ...]:
    """One map per plane of boundaries (same two parameters, same other parameters),
    over the union of their windows; none for models above ``MAX_MAP_STATES`` states."""
    if model.size > MAX_MAP_STATES:
        return ()
    groups: dict[tuple, list] = {}
    for boundary in boundaries:
        if not len(boundary) or not boundary.window:
            continue
        others = np.array(boundary.parameters, dtype=float)
        others[[model.parameter_index(boundary.first), model.parameter_index(boundary.second)]] = 0
        groups.setdefault((boundary.first, boundary.second, tuple(others)), []).append(boundary)
    if not groups:
        return ()
    searched = [t for t in scan.traces if t.search is not None]
    given = None
    if searched:
        from branchline.problems.window_search import search_box

        given = search_box(model, searched[0])
    seen = [b.states for b in branches if len(b)] + [b.states for b in boundaries if len(b)]
    box = state_box(model, seen, given)
    maps = []
    for members in groups.values():
        first, second = members[0].first, members[0].second
        window = (
            (min(b.window[first][0] for b in members), max(b.window[first][1] for b in members)),
            (min(b.window[second][0] for b in members), max(b.window[second][1] for b in members)),
        )
        maps.append(stability_map(model, members, window, box))
    return tuple(maps)
