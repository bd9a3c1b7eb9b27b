"""Batched linear algebra for many tiny symmetric positive-definite systems.

LAPACK through numpy's gufuncs costs roughly 10-30 microseconds per small matrix, which
dominates when a screening solves hundreds of thousands of 3x3 to 12x12 systems (drivers x
surrogates x lags x forecast origins). These routines loop over the matrix dimension (at
most a dozen steps) and vectorise over the batch, so each step is one array operation over
all systems at once. Cholesky factorisation as in Golub & Van Loan (2013, Matrix
Computations, 4th ed., algorithm 4.2.1; number from memory).
"""
from __future__ import annotations

import numpy as np


def cholesky(A: np.ndarray) -> np.ndarray:
    """Lower-triangular L with A = L L' for a batch (..., q, q) of SPD matrices."""
    A = np.asarray(A, float)
    q = A.shape[-1]
    L = np.zeros_like(A)
    for j in range(q):
        row = L[..., j, :j]
        d = A[..., j, j] - np.einsum("...k,...k->...", row, row)
        ljj = np.sqrt(np.maximum(d, 1e-300))
        L[..., j, j] = ljj
        if j + 1 < q:
            below = L[..., j + 1 :, :j]
            L[..., j + 1 :, j] = (A[..., j + 1 :, j] - np.einsum("...ik,...k->...i", below, row)) / ljj[..., None]
    return L


def forward(L: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve L z = b (lower triangular) for a batch; b is (..., q)."""
    q = L.shape[-1]
    z = np.zeros(np.broadcast_shapes(L.shape[:-1], b.shape))
    for i in range(q):
        z[..., i] = (b[..., i] - np.einsum("...k,...k->...", L[..., i, :i], z[..., :i])) / L[..., i, i]
    return z


def backward(L: np.ndarray, z: np.ndarray) -> np.ndarray:
    """Solve L' x = z (L lower triangular) for a batch; z is (..., q)."""
    q = L.shape[-1]
    x = np.zeros(np.broadcast_shapes(L.shape[:-1], z.shape))
    for i in range(q - 1, -1, -1):
        x[..., i] = (z[..., i] - np.einsum("...k,...k->...", L[..., i + 1 :, i], x[..., i + 1 :])) / L[..., i, i]
    return x


def spd_solve(A: np.ndarray, b: np.ndarray) -> np.ndarray:
    """x with A x = b for a batch of SPD systems: A (..., q, q), b (..., q)."""
    L = cholesky(A)
    return backward(L, forward(L, b))


def expanding_cross(Wl: np.ndarray, Wr: np.ndarray, origins: np.ndarray) -> np.ndarray:
    """sum_{t < o} Wl[t]' Wr[t] for every origin o: the normal-equation blocks of every
    expanding training window at once.

    Wl (..., T, p), Wr (..., T, q) (or broadcastable); returns (..., n_origins, p, q). The
    rows before the first origin are summed by one batched matrix product; the later rows are
    accumulated by a cumulative sum, so each window's sum uses only its own rows.
    """
    o0 = int(origins[0])
    head = np.swapaxes(Wl[..., :o0, :], -1, -2) @ Wr[..., :o0, :]
    rows = slice(o0, int(origins[-1]))
    outer = Wl[..., rows, :, None] * Wr[..., rows, None, :]
    cum = np.cumsum(outer, axis=-3)
    zero = np.zeros(cum.shape[:-3] + (1,) + cum.shape[-2:])
    cum = np.concatenate([zero, cum], axis=-3)
    return head[..., None, :, :] + cum[..., np.asarray(origins) - o0, :, :]
