"""One word for the shape of a fitted curve (our own screening rule, not a published test)."""
from __future__ import annotations

import numpy as np

__all__ = ["SHAPE_WORDS", "shape_word"]

#: The vocabulary returned by :func:`shape_word`.
SHAPE_WORDS = ("increasing", "decreasing", "threshold", "hump", "u-shape", "flat")


def shape_word(
    grid,
    curve,
    se=None,
    *,
    scale=None,
    z: float = 3.0,
    flat_fraction: float = 0.1,
    side_fraction: float = 0.25,
    change_fraction: float = 0.7,
    width_fraction: float = 0.35,
) -> str:
    """One word for the shape of a fitted curve on an increasing grid.

    Rules, applied in order (our own screening rule, not a published test):

    1. ``flat``: with ``se``, if a horizontal line fits inside the pointwise band
       ``curve -/+ z * se`` (i.e. ``max(curve - z se) <= min(curve + z se)``). The
       default ``z = 3`` is wider than a pointwise 95% band on purpose, as a rough stand-in
       for a simultaneous band: in our simulations (n = 40, GCV, pure noise) ``z = 2``
       called about 20% of noise fits non-flat, ``z = 3`` about 3%. Without
       ``se`` but with ``scale`` (e.g. sd of y), if ``range(curve) < flat_fraction *
       scale``. With neither, only an exactly constant curve is flat.
    2. ``hump`` / ``u-shape``: the maximum (minimum) lies inside the grid and the curve
       falls (rises) from it by at least ``side_fraction`` of its range towards *both*
       ends. If both a hump and a u-shape qualify, the one with the larger smaller-side
       drop wins.
    3. otherwise the curve is monotone in the broad sense; its direction is the sign of
       ``curve[-1] - curve[0]``. ``threshold`` if ``change_fraction`` (70%) of that
       end-to-end change happens within ``width_fraction`` (35%) of the x-range,
       otherwise ``increasing`` / ``decreasing``.
    """
    g = np.asarray(grid, dtype=float).ravel()
    c = np.asarray(curve, dtype=float).ravel()
    if g.size != c.size or g.size < 3:
        raise ValueError("grid and curve must be 1-D of the same length >= 3")
    if not np.all(np.isfinite(c)):
        raise ValueError("curve has non-finite values")
    rng = float(c.max() - c.min())
    if se is not None:
        s = np.broadcast_to(np.asarray(se, dtype=float).ravel(), c.shape)
        if np.max(c - z * s) <= np.min(c + z * s):
            return "flat"
    elif scale is not None and rng < flat_fraction * float(scale):
        return "flat"
    if rng <= 1e-12 * (1.0 + float(np.abs(c).max())):
        return "flat"

    i_max, i_min = int(np.argmax(c)), int(np.argmin(c))
    hump = min(c[i_max] - c[0], c[i_max] - c[-1]) if 0 < i_max < c.size - 1 else -np.inf
    ushape = min(c[0] - c[i_min], c[-1] - c[i_min]) if 0 < i_min < c.size - 1 else -np.inf
    need = side_fraction * rng
    if max(hump, ushape) >= need:
        return "hump" if hump >= ushape else "u-shape"

    total = float(c[-1] - c[0])
    sign = 1.0 if total > 0 else -1.0
    # smallest x-window [g_i, g_j] over which the curve moves >= change_fraction of the
    # end-to-end change in the overall direction
    moves = sign * (c[None, :] - c[:, None])            # [i, j] = change from i to j
    widths = g[None, :] - g[:, None]
    ok = (moves >= change_fraction * abs(total)) & (widths > 0)
    min_width = widths[ok].min() if ok.any() else np.inf
    if min_width <= width_fraction * (g[-1] - g[0]):
        return "threshold"
    return "increasing" if sign > 0 else "decreasing"
