"""A coefficient table packed for the kernels: only the nonzero coefficients, row by row.

DOP853's 16 x 16 matrix has 86 nonzeros out of 120 below the diagonal, and the error and dense
rows are sparser still; the kernels loop over (column, value) pairs so that a zero coefficient
costs nothing. Rows are stored compressed: row i holds entries ptr[i] .. ptr[i+1]-1 of col/val.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .tableaux import Tableau

# Layout of the int64 configuration array an embedded kernel receives.
CFG_N_STAGES = 0  # stages of one step; row n_stages of A is the new solution (FSAL)
CFG_N_ROWS = 1  # all rows of A, dense-output stages included
CFG_ERR_KIND = 2  # ERR_SINGLE or ERR_DOP853
CFG_FSAL_IN_ERR = 3  # 1 when the error estimate weighs the FSAL stage (evaluate it before)
CFG_N_DENSE = 4  # rows of the dense matrix (F3, F4, ...)
N_CFG = 5

ERR_SINGLE = 0  # err = h sum e_j k_j, RMS norm
ERR_DOP853 = 1  # the 5th/3rd-order combination of DOP853


def _compress(m: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    m = np.atleast_2d(m)
    ptr = np.zeros(m.shape[0] + 1, dtype=np.int64)
    cols: list[int] = []
    vals: list[float] = []
    for i, row in enumerate(m):
        nz = np.flatnonzero(row)
        cols.extend(int(j) for j in nz)
        vals.extend(float(row[j]) for j in nz)
        ptr[i + 1] = len(cols)
    return ptr, np.array(cols, dtype=np.int64), np.array(vals, dtype=np.float64)


@dataclass(frozen=True)
class Packed:
    """The arrays a kernel reads, in the order the kernels take them (see `args`)."""

    a_ptr: np.ndarray
    a_col: np.ndarray
    a_val: np.ndarray
    e_ptr: np.ndarray  # row 0: main estimate; row 1: DOP853's 3rd-order estimate (else empty)
    e_col: np.ndarray
    e_val: np.ndarray
    d_ptr: np.ndarray
    d_col: np.ndarray
    d_val: np.ndarray
    cfg: np.ndarray
    n_rows: int

    def args(self) -> tuple:
        return (
            self.a_ptr,
            self.a_col,
            self.a_val,
            self.e_ptr,
            self.e_col,
            self.e_val,
            self.d_ptr,
            self.d_col,
            self.d_val,
            self.cfg,
        )


def pack(tab: Tableau) -> Packed:
    rows = tab.a.shape[0]
    a_ptr, a_col, a_val = _compress(tab.a)
    ns = tab.n_stages
    if tab.e is not None:
        e = np.zeros((2, ns + 1))
        e[0] = tab.e
        if tab.e3 is not None:
            e[1] = tab.e3
    else:
        e = np.zeros((2, ns + 1))
    e_ptr, e_col, e_val = _compress(e)
    d = tab.dense if tab.dense is not None else np.zeros((1, rows))
    d_ptr, d_col, d_val = _compress(d)
    cfg = np.zeros(N_CFG, dtype=np.int64)
    cfg[CFG_N_STAGES] = ns
    cfg[CFG_N_ROWS] = rows
    cfg[CFG_ERR_KIND] = ERR_DOP853 if tab.e3 is not None else ERR_SINGLE
    cfg[CFG_FSAL_IN_ERR] = int(np.any(e[:, ns] != 0.0))
    cfg[CFG_N_DENSE] = 0 if tab.dense is None else tab.dense.shape[0]
    return Packed(a_ptr, a_col, a_val, e_ptr, e_col, e_val, d_ptr, d_col, d_val, cfg, rows)
