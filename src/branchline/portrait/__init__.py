"""Phase portraits: the plane, equilibria and their types, manifolds, trajectories."""
