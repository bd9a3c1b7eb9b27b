"""Batched normal-equation blocks of expanding training windows."""
from __future__ import annotations

import numpy as np


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
