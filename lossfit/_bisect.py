"""Interval search in a sorted array, compiled (shared by the thermal rules and the
rate tables of the decay integrator)."""

__all__ = ["interval_of"]

import numba


@numba.njit(cache=True)
def interval_of(edges, x):
    """Index i with edges[i] <= x < edges[i + 1] by bisection, clipped to [0, len - 2]."""
    lo = 0
    hi = edges.size - 1
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if edges[mid] <= x:
            lo = mid
        else:
            hi = mid
    return lo
