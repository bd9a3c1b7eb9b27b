"""Batched normal equations of expanding training windows.

Every rolling-origin fit of lagsieve is least squares on the rows [0, o) for every forecast
origin o. The sums over a window are taken as one matrix product with the window mask
(O, T): a member's rows times the mask's columns, so a batch of members is one BLAS call
(``gemm``) rather than a cumulative sum over stacked outer products.

:func:`expanding_added` fits a design that is shared by the whole batch (a baseline: intercept,
previous response, year, competitors) plus a few columns that differ between members (the
driver at one lag, real or surrogate) through the partitioned normal equations: the shared
block is inverted once per origin, and each member only solves its own k x k Schur complement
(k = 1: a division). Same least-squares solution as a solve of the whole system, with a
fraction of the work and of the memory (Seber & Lee 2003, Linear Regression Analysis, 2nd ed.,
section 3.7 on adding columns to a regression; the added-variable form is the
Frisch-Waugh-Lovell theorem; section from memory).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Relative ridge on every expanding-window system, against exact rank deficiency:
#: ``1e-10 tr(A) / p`` on the diagonal of the p x p block it belongs to.
RIDGE = 1e-10


def window_mask(origins: np.ndarray, n_rows: int, weights: np.ndarray | None = None) -> np.ndarray:
    """(O, n_rows) weights of every training window: w_t for t < o, 0 from the origin on."""
    origins = np.asarray(origins, int)
    mask = (np.arange(n_rows)[None, :] < origins[:, None]).astype(float)
    return mask if weights is None else mask * np.asarray(weights, float)[None, :]


def window_cross(Wl: np.ndarray, Wr: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """sum_t mask[o, t] Wl[t]' Wr[t] for every window o: the normal-equation blocks of every
    expanding training window at once.

    Wl (..., T, p), Wr (..., T, q) (broadcastable), mask (O, T) from :func:`window_mask`;
    returns (..., O, p, q): the products of every row, (... p q, T), times the mask's
    transpose (T, O) in one matrix product.
    """
    Wl, Wr = np.asarray(Wl, float), np.asarray(Wr, float)
    outer = Wl[..., :, :, None] * Wr[..., :, None, :]  # (..., T, p, q)
    T, p, q = outer.shape[-3:]
    sums = np.moveaxis(outer, -3, -1).reshape(-1, T) @ mask.T  # (... p q, O)
    return np.moveaxis(sums.reshape(outer.shape[:-3] + (p, q, mask.shape[0])), -1, -3)


def _ridged_inverse(A: np.ndarray) -> np.ndarray:
    """(A + RIDGE tr(A) / p I)^-1 of a stack (..., p, p)."""
    p = A.shape[-1]
    ridge = RIDGE * np.trace(A, axis1=-2, axis2=-1) / p
    return np.linalg.inv(A + ridge[..., None, None] * np.eye(p))


@dataclass(frozen=True)
class SharedFit:
    """Expanding-window least squares of the shared design alone (O origins, p columns)."""

    level: float          # first window's (weighted) mean of y, taken out before the sums
    mask: np.ndarray      # (O, T) window weights
    ginv: np.ndarray      # (O, p, p) (Z'WZ + ridge)^-1 of every window
    beta: np.ndarray      # (O, p) coefficients for y minus the level
    rss: np.ndarray       # (O,) training (weighted) residual sum of squares
    forecast: np.ndarray  # (O,) forecast of the row at every origin
    yc: np.ndarray        # (T,) y minus the level
    trace: np.ndarray     # (O,) tr(Z'WZ), for the ridge of the added block


def expanding_shared(Z: np.ndarray, y: np.ndarray, origins: np.ndarray,
                     weights: np.ndarray | None = None) -> SharedFit:
    """Least squares of y (T,) on Z (T, p) over rows [0, o) for every origin o.

    Column 0 of Z must be the intercept. y is centred on the (weighted) mean of the rows before
    the first origin (training rows of every window) and that mean is added back to the
    intercept: exact with an intercept in the design, and it keeps the ridge (``RIDGE``
    tr(A) / p, against exact rank deficiency) from acting in proportion to the response's level.
    """
    Z, y = np.asarray(Z, float), np.asarray(y, float)
    origins = np.asarray(origins, int)
    if not np.all(Z[:, 0] == 1.0):
        raise ValueError("column 0 of the design must be the intercept")
    mask = window_mask(origins, len(y), weights)
    o0 = int(origins[0])
    level = float(mask[0, :o0] @ y[:o0] / mask[0, :o0].sum())
    yc = y - level
    A = window_cross(Z, Z, mask)  # (O, p, p)
    ginv = _ridged_inverse(A)
    b = mask @ (Z * yc[:, None])  # (O, p)
    beta = np.einsum("opq,oq->op", ginv, b)
    rss = mask @ (yc * yc) - np.einsum("op,op->o", beta, b)
    return SharedFit(level=level, mask=mask, ginv=ginv, beta=beta, rss=rss,
                     forecast=level + np.einsum("op,op->o", Z[origins], beta), yc=yc,
                     trace=np.trace(A, axis1=-2, axis2=-1))


@dataclass(frozen=True)
class AddedFit:
    """Expanding-window fits of the shared design plus each member's own columns."""

    shared: SharedFit
    coef: np.ndarray      # (..., O, k) coefficients of the added columns
    rss: np.ndarray       # (..., O) training residual sum of squares
    forecast: np.ndarray  # (..., O) forecast of the row at every origin


def expanding_added(Z: np.ndarray, X: np.ndarray, y: np.ndarray, origins: np.ndarray,
                    weights: np.ndarray | None = None) -> AddedFit:
    """Least squares of y on [Z, X_m] over rows [0, o) for every origin o and batch member m.

    Z (T, p) is shared (column 0 the intercept), X (..., T, k) holds each member's own columns.
    With G = (Z'WZ)^-1, C = Z'WX, the Schur complement S = X'WX - C'GC and
    s = X'Wy - C'G Z'Wy, the added coefficients are g = S^-1 s, the residual sum of squares
    falls by s'g, and the forecast is the shared fit's plus (x_o - z_o'GC) g (partitioned
    normal equations). S carries a ridge of ``RIDGE`` (tr(Z'WZ) + tr(X'WX)) / (p + k).

    Layout: the members are the last axis of every product (N = members, O = origins), so
    each step is one matrix product over all members: C (O, p, N k) = (mask Z)' X.
    """
    Z, X = np.asarray(Z, float), np.asarray(X, float)
    origins = np.asarray(origins, int)
    sh = expanding_shared(Z, y, origins, weights)
    T, p = Z.shape
    k, O = X.shape[-1], len(origins)
    batch = X.shape[:-2]
    if k == 0:  # nothing added: every member is the shared fit
        return AddedFit(shared=sh, coef=np.zeros(batch + (O, 0)), rss=np.broadcast_to(sh.rss, batch + (O,)),
                        forecast=np.broadcast_to(sh.forecast, batch + (O,)))
    N = int(np.prod(batch, dtype=int))
    Xt = X.reshape(N, T, k).transpose(1, 0, 2).reshape(T, N * k)  # rows = years
    mz = (sh.mask[:, None, :] * Z.T[None, :, :]).reshape(O * p, T)
    C = (mz @ Xt).reshape(O, p, N * k)
    GC = sh.ginv @ C  # (O, p, N k)
    e = (sh.mask * sh.yc) @ Xt  # (O, N k)
    s = (e - (sh.beta[:, None, :] @ C)[:, 0, :]).reshape(O, N, k)
    lead = (Xt[origins] - (Z[origins][:, None, :] @ GC)[:, 0, :]).reshape(O, N, k)
    S, trace = _schur(Xt, sh.mask, C, GC, k)  # (O, N, k, k), (O, N)
    ridge = RIDGE * (sh.trace[:, None] + trace) / (p + k)  # (O, N)
    if k == 1:
        g = s / (S[..., 0] + ridge[..., None])
    else:
        g = np.linalg.solve(S + ridge[..., None, None] * np.eye(k), s[..., None])[..., 0]
    rss = sh.rss[:, None] - np.sum(s * g, axis=-1)  # (O, N)
    fc = sh.forecast[:, None] + np.sum(lead * g, axis=-1)

    def members_first(a):  # (O, N, ...) -> (..., O, ...)
        return np.moveaxis(a, 0, 1).reshape(batch + (O,) + a.shape[2:])

    return AddedFit(shared=sh, coef=members_first(g), rss=members_first(rss), forecast=members_first(fc))


def _schur(Xt: np.ndarray, mask: np.ndarray, C: np.ndarray, GC: np.ndarray, k: int):
    """(S, tr X'WX): the Schur complement X'WX - C'GC (O, N, k, k) of every member and window,
    and the trace of its X'WX (O, N). Xt (T, N k), mask (O, T), C and GC (O, p, N k)."""
    O, p, Nk = C.shape
    if k == 1:  # one column: squares times the mask, no outer products
        D = mask @ (Xt * Xt)  # (O, N)
        return (D - np.sum(C * GC, axis=1))[..., None, None], D
    T, N = Xt.shape[0], Nk // k
    X3 = Xt.reshape(T, N, k)
    D = (mask @ (X3[:, :, :, None] * X3[:, :, None, :]).reshape(T, N * k * k)).reshape(O, N, k, k)
    S = D - np.einsum("opnk,opnl->onkl", C.reshape(O, p, N, k), GC.reshape(O, p, N, k))
    return S, np.trace(D, axis1=-2, axis2=-1)
