"""Stability maps -> run.json's ``stability_maps`` entry (what the figure is drawn from)."""

from __future__ import annotations

from typing import Any

from branchline.results.records import RunResult
from branchline.results.tables import _jsonable


def stability_map_entries(result: RunResult) -> list[dict[str, Any]]:
    """One entry per map: the plane, window, curves, state box and each region's samples."""
    entries = []
    for found in result.stability_maps:
        others = {
            name: float(value)
            for name, value in zip(result.model.parameters, found.parameters, strict=True)
            if name not in (found.first, found.second)
        }
        entries.append(
            {
                "parameters": [found.first, found.second],
                "window": {found.first: found.window[0], found.second: found.window[1]},
                "boundaries": list(found.boundaries),
                "fixed": others,
                "box": {"low": found.box[0], "high": found.box[1]},
                "resolution": found.resolution,
                "regions": [
                    {
                        "label": region.label,
                        "share": region.share,
                        "uniform": region.uniform,
                        "samples": [
                            {
                                found.first: sample.first,
                                found.second: sample.second,
                                "equilibria": sample.equilibria,
                                "stable": sample.stable,
                                "unstable_eigenvalues": list(sample.unstable),
                            }
                            for sample in region.samples
                        ],
                    }
                    for region in found.regions
                ],
            }
        )
    return _jsonable(entries)
