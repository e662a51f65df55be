"""How far the start equilibrium lies from the guess it was solved from.

Newton's method from a poor guess may converge to another equilibrium than
the one meant (the disease-free state instead of the endemic one, say). The
run and ``inspect`` therefore say which equilibrium was found and how far it
lies from the guess, and warn when it is far.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

Array = np.ndarray

# A state that moved by more than this fraction of its own size (or of the
# guess's largest state, for states guessed near zero) counts as far: Newton
# from a good guess changes states by a few per cent at most (our own rule).
FAR_RELATIVE_CHANGE = 0.25
# States guessed this small relative to the largest guessed state are measured
# against that largest state instead of their own size.
SMALL_STATE_FRACTION = 1e-3
# How many states a message names.
SHOWN_STATES = 6


@dataclass(frozen=True)
class StartDistance:
    """The equilibrium found against its guess.

    Attributes
    ----------
    distance : float
        Euclidean distance |x_found - x_guess| (state units).
    relative_change : float
        The largest change of one state relative to its guessed size
        (``SMALL_STATE_FRACTION`` of the largest guessed state at least).
    worst_state : str
        The state with that change.
    far : bool
        ``relative_change > FAR_RELATIVE_CHANGE``.
    text : str
        One sentence for a person.
    """

    distance: float
    relative_change: float
    worst_state: str
    far: bool
    text: str


def start_distance(states: tuple[str, ...], guess: Array, found: Array) -> StartDistance:
    """Compare the equilibrium ``found`` (n,) with its ``guess`` (n,); ``states`` names them."""
    guess = np.asarray(guess, dtype=float)
    found = np.asarray(found, dtype=float)
    change = np.abs(found - guess)
    floor = max(SMALL_STATE_FRACTION * float(np.max(np.abs(guess), initial=0.0)), 1e-300)
    relative = change / np.maximum(np.abs(guess), floor)
    worst = int(np.argmax(relative)) if relative.size else 0
    relative_change = float(relative[worst]) if relative.size else 0.0
    distance = float(np.linalg.norm(found - guess))
    far = relative_change > FAR_RELATIVE_CHANGE
    shown = ", ".join(
        f"{name}={value:.6g}" for name, value in zip(states[:SHOWN_STATES], found[:SHOWN_STATES])
    )
    if len(states) > SHOWN_STATES:
        shown += f", ... (|x|={float(np.linalg.norm(found)):.6g})"
    name = states[worst] if states else "x0"
    text = (
        f"the start guess converged to the equilibrium {shown}, at distance {distance:.3g} "
        f"from the guess (largest change: {name} by {relative_change:.3g} of its guessed size)"
    )
    if far:
        text += "; that is far from the guess: check that it is the equilibrium you meant"
    return StartDistance(distance, relative_change, name, far, text)
