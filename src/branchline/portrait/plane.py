"""The plane a phase portrait is drawn in, and the vector field seen in it.

For a planar model the plane is the state space itself. For a larger model it
is an affine slice through an equilibrium x*: x = x* + s e1 + t e2, where e1,
e2 are either two coordinate directions (two named states; every other state
held at its value at x*) or the real plane spanned by the two leading
eigenvectors at x* (real and imaginary parts of a complex pair, or the two
leading real eigenvectors). Arrows and nullclines show the flow's component
in the plane at points of the slice; trajectories are of the full model,
projected onto the plane.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from branchline.model.build import Model

Array = np.ndarray


@dataclass(frozen=True)
class Plane:
    """An affine plane x = origin + basis @ (s, t) in state space.

    Attributes
    ----------
    origin : ndarray (n,)
    basis : ndarray (n, 2)
        Unit columns e1, e2 (coordinate vectors or eigenvector directions).
    axes : tuple of two str
        Axis labels.
    kind : str
        ``"states"`` (two coordinate directions) or ``"eigenvectors"``.
    """

    origin: Array
    basis: Array
    axes: tuple[str, str]
    kind: str

    def to_state(self, coordinates: Array) -> Array:
        """States of plane points: (2,) -> (n,), (k, 2) -> (k, n)."""
        return self.origin + np.asarray(coordinates) @ self.basis.T

    @cached_property
    def pseudo_inverse(self) -> Array:
        """The pseudo-inverse of ``basis`` (2, n), computed once: projections run at
        every step of every trajectory, and an SVD per call dominated a portrait."""
        return np.linalg.pinv(self.basis)

    def to_plane(self, states: Array) -> Array:
        """Plane coordinates of states (least-squares projection): (n,) -> (2,), (k, n) -> (k, 2)."""
        return (np.asarray(states) - self.origin) @ self.pseudo_inverse.T

    def project_vector(self, vectors: Array) -> Array:
        """Plane components of state-space vectors: (n,) -> (2,), (k, n) -> (k, 2)."""
        return np.asarray(vectors) @ self.pseudo_inverse.T

    @property
    def exact(self) -> bool:
        """True when the plane is the whole state space (a planar model)."""
        return self.basis.shape[0] == 2


def state_plane(model: Model, origin: Array, first: str, second: str) -> Plane:
    """The slice through ``origin`` along two named states (coordinates: their values)."""
    basis = np.zeros((model.size, 2))
    i, j = model.states.index(first), model.states.index(second)
    basis[i, 0] = basis[j, 1] = 1.0
    # the plane's coordinates are the two states' own values; the others keep origin's
    held = np.array(origin, dtype=float)
    held[[i, j]] = 0.0
    return Plane(held, basis, (first, second), "states")


def eigenvector_plane(jacobian: Array, origin: Array) -> Plane:
    """The plane of the two leading eigenvectors of ``jacobian`` (largest real parts) at
    ``origin``: the real and imaginary parts of a complex leading pair, else the two
    leading real eigenvectors; orthonormalized (QR) so that lengths read true."""
    values, vectors = np.linalg.eig(np.asarray(jacobian, dtype=float))
    order = np.argsort(-values.real)
    lead = vectors[:, order[0]]
    if abs(values[order[0]].imag) > 0.0:
        raw = np.column_stack([lead.real, lead.imag])
        names = ("along the leading pair's real part", "along its imaginary part")
    else:
        raw = np.column_stack([lead.real, vectors[:, order[1]].real])
        names = ("along the leading eigenvector", "along the second eigenvector")
    basis, _ = np.linalg.qr(raw)
    return Plane(np.asarray(origin, dtype=float), basis, names, "eigenvectors")


def planar(model: Model) -> Plane:
    """The state space of a two-state model."""
    return state_plane(model, np.zeros(2), model.states[0], model.states[1])


def field_at(model: Model, states: Array, parameters: Array) -> Array:
    """f at many states at once: (k, n) -> (k, n); vectorized when the model allows it."""
    states = np.asarray(states, dtype=float)
    with np.errstate(all="ignore"):
        try:
            values = np.asarray(model.rhs(states.T, parameters), dtype=float)
            if values.shape == states.T.shape:
                return values.T
        except (ValueError, TypeError, IndexError, ArithmeticError):
            pass
        rows = []
        for x in states:
            try:
                rows.append(np.asarray(model.rhs(x, parameters), dtype=float))
            except (ValueError, TypeError, ArithmeticError):
                rows.append(np.full(states.shape[1], np.nan))
        return np.array(rows)
