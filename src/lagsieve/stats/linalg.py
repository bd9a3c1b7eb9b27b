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
    """Expanding-window least squares of the shared design alone (O origins, p columns), for one
    design or for every member of a batch (leading axes ``...``, each member its own)."""

    level: np.ndarray     # (...) first window's (weighted) mean of y, taken out before the sums
    mask: np.ndarray      # (O, T) window weights
    ginv: np.ndarray      # (..., O, p, p) (Z'WZ + ridge)^-1 of every window
    beta: np.ndarray      # (..., O, p) coefficients for y minus the level
    rss: np.ndarray       # (..., O) training (weighted) residual sum of squares
    forecast: np.ndarray  # (..., O) forecast of the row at every origin
    yc: np.ndarray        # (..., T) y minus the level
    trace: np.ndarray     # (..., O) tr(Z'WZ), for the ridge of the added block
    Z: np.ndarray         # (..., T, p) the design, broadcast to the batch


def expanding_shared(Z: np.ndarray, y: np.ndarray, origins: np.ndarray,
                     weights: np.ndarray | None = None) -> SharedFit:
    """Least squares of y (..., T) on Z (..., T, p) over rows [0, o) for every origin o.

    One design and response, (T, p) and (T,), or a batch of members each with its own response
    or design or both (leading axes broadcast against each other: draws of a response, each with
    its own previous year in the design); ``weights`` (T,) are the same for every member.
    Column 0 of Z must be the intercept. y is centred on the (weighted) mean of the rows before
    the first origin (training rows of every window) and that mean is added back to the
    intercept: exact with an intercept in the design, and it keeps the ridge (``RIDGE``
    tr(A) / p, against exact rank deficiency) from acting in proportion to the response's level.
    """
    Z, y = np.asarray(Z, float), np.asarray(y, float)
    origins = np.asarray(origins, int)
    if not np.all(Z[..., 0] == 1.0):
        raise ValueError("column 0 of the design must be the intercept")
    batch = np.broadcast_shapes(Z.shape[:-2], y.shape[:-1])
    Z, y = np.broadcast_to(Z, batch + Z.shape[-2:]), np.broadcast_to(y, batch + y.shape[-1:])
    mask = window_mask(origins, y.shape[-1], weights)
    o0 = int(origins[0])
    level = y[..., :o0] @ mask[0, :o0] / mask[0, :o0].sum()
    yc = y - level[..., None]
    A = window_cross(Z, Z, mask)  # (..., O, p, p)
    ginv = _ridged_inverse(A)
    b = mask @ (Z * yc[..., None])  # (..., O, p)
    beta = np.einsum("...opq,...oq->...op", ginv, b)
    rss = (yc * yc) @ mask.T - np.einsum("...op,...op->...o", beta, b)
    return SharedFit(level=level, mask=mask, ginv=ginv, beta=beta, rss=rss,
                     forecast=level[..., None] + np.einsum("...op,...op->...o", Z[..., origins, :], beta), yc=yc,
                     trace=np.trace(A, axis1=-2, axis2=-1), Z=Z)


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

    The shared part may itself be a batch (Z (A..., T, p) and y (A..., T) as in
    :func:`expanding_shared`: each draw of a response with its own design); every one of its
    fits is then crossed with every member of X, and the results are (A..., ..., O).

    Layout: the members are the last axis of every product (N = members, O = origins), so
    each step is one matrix product over all members: C (O, p, N k) = (mask Z)' X (one such
    product per fit of the shared part).
    """
    X = np.asarray(X, float)
    origins = np.asarray(origins, int)
    sh = expanding_shared(Z, y, origins, weights)
    shared = sh.rss.shape[:-1]  # the shared part's batch (A...), () for one design
    T, p = sh.Z.shape[-2:]
    k, O = X.shape[-1], len(origins)
    batch = X.shape[:-2]
    out = shared + batch + (O,)
    if k == 0:  # nothing added: every member is the shared fit
        def spread(a):  # (A..., O) -> (A..., ..., O)
            return np.broadcast_to(a.reshape(shared + (1,) * len(batch) + (O,)), out)
        return AddedFit(shared=sh, coef=np.zeros(out + (0,)), rss=spread(sh.rss), forecast=spread(sh.forecast))
    M, N = int(np.prod(shared, dtype=int)), int(np.prod(batch, dtype=int))
    Zm, yc = sh.Z.reshape(M, T, p), sh.yc.reshape(M, 1, T)
    Xt = X.reshape(N, T, k).transpose(1, 0, 2).reshape(T, N * k)  # rows = years
    Zt = np.ascontiguousarray(Zm.transpose(0, 2, 1))  # (M, p, T): years last, for the products with the mask
    mz = (sh.mask[None, :, None, :] * Zt[:, None, :, :]).reshape(M, O * p, T)
    C = (mz @ Xt).reshape(M, O, p, N * k)
    GC = sh.ginv.reshape(M, O, p, p) @ C  # (M, O, p, N k)
    e = (sh.mask * yc) @ Xt  # (M, O, N k)
    s = (e - (sh.beta.reshape(M, O, 1, p) @ C)[..., 0, :]).reshape(M, O, N, k)
    lead = (Xt[origins] - (Zm[:, origins, None, :] @ GC)[..., 0, :]).reshape(M, O, N, k)
    S, trace = _schur(Xt, sh.mask, C, GC, k)  # (M, O, N, k, k), (M, O, N)
    ridge = RIDGE * (sh.trace.reshape(M, O, 1) + trace) / (p + k)  # (M, O, N)
    if k == 1:
        g = s / (S[..., 0] + ridge[..., None])
    else:
        g = np.linalg.solve(S + ridge[..., None, None] * np.eye(k), s[..., None])[..., 0]
    rss = sh.rss.reshape(M, O, 1) - np.sum(s * g, axis=-1)  # (M, O, N)
    fc = sh.forecast.reshape(M, O, 1) + np.sum(lead * g, axis=-1)

    def members_first(a):  # (M, O, N, ...) -> (A..., ..., O, ...)
        return np.moveaxis(a, 1, 2).reshape(shared + batch + (O,) + a.shape[3:])

    return AddedFit(shared=sh, coef=members_first(g), rss=members_first(rss), forecast=members_first(fc))


def _schur(Xt: np.ndarray, mask: np.ndarray, C: np.ndarray, GC: np.ndarray, k: int):
    """(S, tr X'WX): the Schur complement X'WX - C'GC (M, O, N, k, k) of every fit of the shared
    part, member and window, and the trace of its X'WX (O, N). Xt (T, N k), mask (O, T), C and
    GC (M, O, p, N k)."""
    M, O, p, Nk = C.shape
    if k == 1:  # one column: squares times the mask, no outer products
        D = mask @ (Xt * Xt)  # (O, N)
        return (D - np.sum(C * GC, axis=-2))[..., None, None], D
    T, N = Xt.shape[0], Nk // k
    X3 = Xt.reshape(T, N, k)
    D = (mask @ (X3[:, :, :, None] * X3[:, :, None, :]).reshape(T, N * k * k)).reshape(O, N, k, k)
    S = D - np.einsum("mopnk,mopnl->monkl", C.reshape(M, O, p, N, k), GC.reshape(M, O, p, N, k))
    return S, np.trace(D, axis1=-2, axis2=-1)


# ------------------------------------------------------------------------ small matrices
# A stack of many tiny matrices (5 x 5 to 11 x 11, tens of thousands of them: one per
# surrogate, lag and tuning origin) is where LAPACK's per-matrix call dominates: numpy's
# batched inv and eigh call it once per matrix. The kernels below hold the stack's axis last
# and run the textbook algorithms element by element of the small matrix, each step one
# vectorised operation over the whole stack (structure of arrays).

#: Largest matrix inverted by the vectorised Cholesky method; larger ones go to LAPACK (measured
#: on 2,560 and 20,000 matrices: 1.1-1.5x faster up to 7 x 7, slower from 8 x 8 on).
SPD_MAX = 7

#: Largest eigen-problem solved by the vectorised Jacobi method; larger ones go to LAPACK
#: (measured: Jacobi is 4x faster for 3 x 3 and 2x for 4 x 4 on 20,000 matrices, slower
#: from 8 x 8 on, where the sweeps outgrow LAPACK's call overhead).
JACOBI_MAX = 4


def spd_inverse(A: np.ndarray) -> np.ndarray:
    """Inverse of a stack (..., q, q) of symmetric positive definite matrices, by the Cholesky
    factor L (A = L L') and A^-1 = L^-T L^-1 (Golub & Van Loan 2013, Matrix Computations,
    4th ed., section 4.2; from memory), vectorised across the stack, up to :data:`SPD_MAX` x
    :data:`SPD_MAX`; larger matrices, and the whole stack where a factor fails (a matrix not
    numerically positive definite), by numpy.linalg.inv. The stack is moved last for
    :func:`spd_inverse_last` and back."""
    A = np.asarray(A, float)
    q = A.shape[-1]
    if q > SPD_MAX or A.ndim == 2 or A.size == 0:
        return np.linalg.inv(A)
    last = np.ascontiguousarray(np.moveaxis(A.reshape(-1, q, q), 0, -1))  # (q, q, N): the stack last
    return np.moveaxis(spd_inverse_last(last), -1, 0).reshape(A.shape)


def spd_inverse_last(A: np.ndarray) -> np.ndarray:
    """:func:`spd_inverse` of a stack held last, (q, q, N) -> (q, q, N), for kernels that keep their
    systems on the last axis (no copies to and from the stack-first layout)."""
    q = A.shape[0]
    if q <= SPD_MAX and A.shape[-1]:
        out = _inverse_from_factor(_cholesky_last(A))
        if np.all(np.isfinite(out)):
            return out
    return np.ascontiguousarray(np.moveaxis(np.linalg.inv(np.moveaxis(A, -1, 0)), 0, -1))


def spd_solve(A: np.ndarray, B: np.ndarray) -> np.ndarray:
    """X = A^-1 B for a stack A (..., q, q) of symmetric positive definite matrices and B (..., q, k),
    without the inverse: the Cholesky factor A = L L' (LAPACK's potrf through numpy.linalg.cholesky,
    one call for the stack), then forward substitution L Y = B and back substitution L' X = Y, each
    a loop over the q rows (Golub & Van Loan 2013, Matrix Computations, 4th ed., sections 3.1 and
    4.2; from memory) with the stack as the last, contiguous axis: row i is one contraction over
    the rows already solved, ``einsum("jn,jkn->kn")``, across the whole stack (measured on 1,000
    11 x 11 systems with 9 right-hand sides: 1.3 ms for the forward pass against 2.5 ms as
    stacked (1 x i) by (i x k) products with the stack first; spd_solve 2.0 ms against 4.0 ms, on
    the shared 2-core machine at load 5-7).
    numpy's batched inverse or solve calls LAPACK's LU once per matrix, which costs several times
    the factor on stacks of 8 x 8 to 11 x 11 matrices. A stack with a matrix that is not
    numerically positive definite is solved by numpy.linalg.solve."""
    A, B = np.asarray(A, float), np.asarray(B, float)
    try:
        L = np.linalg.cholesky(A)
    except np.linalg.LinAlgError:
        return np.linalg.solve(A, B)
    q, k = A.shape[-1], B.shape[-1]
    shape = np.broadcast_shapes(A.shape[:-2], B.shape[:-2])
    Ls = np.ascontiguousarray(np.moveaxis(np.broadcast_to(L, shape + (q, q)).reshape(-1, q, q), 0, -1))  # (q, q, N)
    Bs = np.moveaxis(np.broadcast_to(B, shape + (q, k)).reshape(-1, q, k), 0, -1)  # (q, k, N)
    X = np.empty(Bs.shape)
    for i in range(q):  # L Y = B, row i from rows 0..i-1
        X[i] = (Bs[i] - np.einsum("jn,jkn->kn", Ls[i, :i], X[:i]) if i else Bs[i]) / Ls[i, i]
    for i in range(q - 1, -1, -1):  # L' X = Y in place, row i from rows i+1..q-1 (L' row i is column i of L)
        if i < q - 1:
            X[i] -= np.einsum("jn,jkn->kn", Ls[i + 1:, i], X[i + 1:])
        X[i] /= Ls[i, i]
    return np.moveaxis(X, -1, 0).reshape(shape + (q, k))


def _cholesky_last(A: np.ndarray) -> list[list]:
    """Lower Cholesky factor of A (q, q, N) as nested lists of (N,) arrays, L[i][j] for j <= i."""
    q = A.shape[0]
    L = [[None] * q for _ in range(q)]
    with np.errstate(invalid="ignore", divide="ignore"):
        for j in range(q):
            d = A[j, j] - sum(L[j][k] * L[j][k] for k in range(j)) if j else A[j, j]
            L[j][j] = np.sqrt(d)
            inv = 1.0 / L[j][j]
            for i in range(j + 1, q):
                v = A[i, j] - sum(L[i][k] * L[j][k] for k in range(j)) if j else A[i, j]
                L[i][j] = v * inv
    return L


def _inverse_from_factor(L: list[list]) -> np.ndarray:
    """A^-1 (q, q, N) = M' M with M = L^-1 (forward substitution, column by column)."""
    q = len(L)
    M = [[None] * q for _ in range(q)]
    with np.errstate(invalid="ignore", divide="ignore"):
        for j in range(q):
            M[j][j] = 1.0 / L[j][j]
            for i in range(j + 1, q):
                v = sum(L[i][k] * M[k][j] for k in range(j, i))
                M[i][j] = -v / L[i][i]
    out = np.empty((q, q) + M[0][0].shape)
    for i in range(q):
        for j in range(i + 1):
            out[i, j] = out[j, i] = sum(M[k][i] * M[k][j] for k in range(i, q))
    return out


def symmetric_eigh(A: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues (..., r), ascending, and eigenvectors (..., r, r) (columns) of a stack of
    symmetric matrices, as numpy.linalg.eigh. Up to :data:`JACOBI_MAX` x :data:`JACOBI_MAX`
    by the cyclic Jacobi method vectorised across the stack (Golub & Van Loan 2013, section
    8.5; from memory), swept until every off-diagonal element is below 1e-15 of the matrix's
    norm (at most 12 sweeps); larger matrices by numpy.linalg.eigh."""
    A = np.asarray(A, float)
    r = A.shape[-1]
    if r > JACOBI_MAX or A.ndim == 2 or A.size == 0:
        return np.linalg.eigh(A)
    a = np.array(np.moveaxis(A.reshape(-1, r, r), 0, -1), order="C")  # (r, r, N): a copy, the stack last
    vals, vecs = symmetric_eigh_last(a)
    return (np.moveaxis(vals, -1, 0).reshape(A.shape[:-1]),
            np.moveaxis(vecs, -1, 0).reshape(A.shape))


def symmetric_eigh_last(a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """:func:`symmetric_eigh` of a stack held last, (r, r, N), which it overwrites: eigenvalues
    (r, N), ascending, and eigenvectors (r, r, N) (columns)."""
    r = a.shape[0]
    if r > JACOBI_MAX or not a.shape[-1]:
        vals, vecs = np.linalg.eigh(np.moveaxis(a, -1, 0))
        return np.moveaxis(vals, 0, -1), np.moveaxis(vecs, 0, -1)
    vals, vecs = _jacobi_last(a)
    order = np.argsort(vals, axis=0)
    return np.take_along_axis(vals, order, axis=0), np.take_along_axis(vecs, order[None, :, :], axis=1)


def _jacobi_last(a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Cyclic Jacobi on a (r, r, N) symmetric stack, in place: (eigenvalues (r, N), V (r, r, N))."""
    r, N = a.shape[0], a.shape[-1]
    V = np.zeros((r, r, N))
    V[range(r), range(r)] = 1.0
    scale = np.sqrt(np.sum(a * a, axis=(0, 1))) + 1e-300
    for _ in range(12):
        off = max((float(np.max(np.abs(a[p, q]) / scale)) for p in range(r) for q in range(p + 1, r)), default=0.0)
        if off < 1e-15:
            break
        for p in range(r - 1):
            for q in range(p + 1, r):
                _rotate(a, V, p, q)
    return a[range(r), range(r)], V


def _rotate(a: np.ndarray, V: np.ndarray, p: int, q: int) -> None:
    """One Jacobi rotation in the (p, q) plane of every matrix of the stack: a[p, q] -> 0. The
    products and sums are taken in place, in the order of the textbook formulas (a temporary
    per step would cost an allocation and a pass over memory each)."""
    apq = a[p, q].copy()
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        tau = a[q, q] - a[p, p]
        tau /= 2.0 * apq
        t = np.hypot(1.0, tau)
        t += np.abs(tau)
        np.divide(np.copysign(1.0, tau), t, out=t)
    np.copyto(t, 0.0, where=np.isnan(t))  # apq = 0 on a tie: no rotation (an infinite tau gives t = 0 itself)
    c = t * t
    c += 1.0
    np.sqrt(c, out=c)
    np.divide(1.0, c, out=c)
    s = t * c
    t *= apq
    a[p, p] -= t
    a[q, q] += t
    a[p, q] = a[q, p] = 0.0
    for k in range(a.shape[0]):
        if k != p and k != q:
            akp, akq = a[k, p].copy(), a[k, q]
            new = c * akp
            new -= s * akq
            akp *= s
            akp += c * akq
            a[k, p] = a[p, k] = new
            a[k, q] = a[q, k] = akp
    vp, vq = V[:, p].copy(), V[:, q]
    new = c * vp
    new -= s * vq
    vp *= s
    vp += c * vq
    V[:, p] = new
    V[:, q] = vp
