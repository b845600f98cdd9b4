"""A coefficient table packed for the kernels: dense rows in flat float64 arrays.

Dense, zeros included, although DOP853's 16 x 16 matrix has only 86 nonzeros out of 120 below
the diagonal: looping over j < i with the coefficient next to the stage it weighs needs no
column index and no indirect load, and measured faster than looping over (column, value) pairs
of the nonzeros (DOP853, body form, 3545 steps: 650 -> 470 ns per step together with the index
masking in rk_embedded_kernel.py; rk4 170 -> 122). A zero coefficient adds 0.0 * K_j, which
leaves a finite sum unchanged bit for bit.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from topdrift.integrators.rk.tableaux import Tableau

# Layout of the int64 configuration array an embedded kernel receives.
CFG_N_STAGES = 0  # stages of one step; row n_stages of A is the new solution (FSAL)
CFG_N_ROWS = 1  # all rows of A, dense-output stages included
CFG_ERR_KIND = 2  # ERR_SINGLE or ERR_DOP853
CFG_FSAL_IN_ERR = 3  # 1 when the error estimate weighs the FSAL stage (evaluate it before)
CFG_N_DENSE = 4  # rows of the dense matrix (F3, F4, ...)
N_CFG = 5

ERR_SINGLE = 0  # err = h sum e_j k_j, RMS norm
ERR_DOP853 = 1  # the 5th/3rd-order combination of DOP853


@dataclass(frozen=True)
class Packed:
    """The arrays a kernel reads, in the order the kernels take them (see `args`).

    a: rows x rows, row-major; row i < n_stages gives stage i, row n_stages the new solution.
    e: 2 x (n_stages + 1); row 0 the main error estimate, row 1 DOP853's 3rd-order one (zeros
       for a single estimate). d: n_dense x rows, the dense-output rows (one row of zeros when the
       method has none)."""

    a: np.ndarray
    e: np.ndarray
    d: np.ndarray
    cfg: np.ndarray
    n_rows: int

    def args(self) -> tuple:
        return (self.a, self.e, self.d, self.cfg)


def _flat(m: np.ndarray) -> np.ndarray:
    return np.ascontiguousarray(m, dtype=np.float64).ravel().copy()


def pack(tab: Tableau) -> Packed:
    rows = tab.a.shape[0]
    ns = tab.n_stages
    e = np.zeros((2, ns + 1))
    if tab.e is not None:
        e[0] = tab.e
        if tab.e3 is not None:
            e[1] = tab.e3
    d = tab.dense if tab.dense is not None else np.zeros((1, rows))
    cfg = np.zeros(N_CFG, dtype=np.int64)
    cfg[CFG_N_STAGES] = ns
    cfg[CFG_N_ROWS] = rows
    cfg[CFG_ERR_KIND] = ERR_DOP853 if tab.e3 is not None else ERR_SINGLE
    cfg[CFG_FSAL_IN_ERR] = int(np.any(e[:, ns] != 0.0))
    cfg[CFG_N_DENSE] = 0 if tab.dense is None else tab.dense.shape[0]
    return Packed(_flat(tab.a), _flat(e), _flat(d), cfg, rows)
