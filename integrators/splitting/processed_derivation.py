"""The derivation of the processed splittings' coefficients (processed_tables.py), to run by
hand: `python -m topdrift.integrators.splitting.processed_derivation`. Not imported by the
suite; tests/test_processed.py checks the tables without it.

Series in the free associative algebra on {A, B} (word index in binary, A = 0, B = 1),
truncated at word length D: a map B(b_0) A(a_1) ... B(b_s) is the product of letter
exponentials, last factor leftmost (the matrix convention; the order conditions are the same
for maps of a phase space, where the product reverses). Conditions, for the kernel K and the Lie
element P = P_2 + P_4: the log of exp(P) K exp(-P) is A + B through degree p - 1 (degrees 2 to
p - 1 vanish); for the processor: its log is P through degree p - 1. Both are solved by Newton's
method on all word coefficients (normal equations), from 8-digit starting points, in mpmath at
45 digits; this script starts from the tables' values rounded to 8 digits and prints the
refined values and the residuals.
"""

from __future__ import annotations

import mpmath
import numpy as np

from topdrift.integrators.splitting.processed_tables import TABLES


class Series:
    def __init__(self, deg: int) -> None:
        self.deg = deg

    def zero(self):
        return [np.array([mpmath.mpf(0)] * (2**d), dtype=object) for d in range(self.deg + 1)]

    def one(self):
        s = self.zero()
        s[0][0] = mpmath.mpf(1)
        return s

    def mul(self, s, t):
        return [
            sum(np.multiply.outer(s[i], t[d - i]).ravel() for i in range(d + 1))
            for d in range(self.deg + 1)
        ]

    def letter_exp(self, c, letter):
        e = self.zero()
        f = mpmath.mpf(1)
        for d in range(self.deg + 1):
            e[d][0 if letter == 0 else 2**d - 1] = f
            f = f * c / (d + 1)
        return e

    def sequence(self, kick, drift):
        m = self.letter_exp(kick[0], 1)
        for a, b in zip(drift, kick[1:], strict=True):
            m = self.mul(self.letter_exp(b, 1), self.mul(self.letter_exp(a, 0), m))
        return m

    def exp(self, x):
        out, term = self.one(), self.one()
        for k in range(1, self.deg + 1):
            term = [v / k for v in self.mul(term, x)]
            out = [a + b for a, b in zip(out, term, strict=True)]
        return out

    def log(self, m):
        n = [a.copy() for a in m]
        n[0] = n[0] * 0
        out, term = self.zero(), None
        for k in range(1, self.deg + 1):
            term = n if term is None else self.mul(term, n)
            out = [a + b * mpmath.mpf((-1) ** (k + 1)) / k for a, b in zip(out, term, strict=True)]
        return out

    def gen(self, letter):
        s = self.zero()
        s[1][letter] = mpmath.mpf(1)
        return s

    def lie(self, a, b):
        return [x - y for x, y in zip(self.mul(a, b), self.mul(b, a), strict=True)]


def lie_p(ser, y):
    """P_2 = y_0 [A,B]; for p = 6 also P_4 = y_1 [A,[A,AB]] + y_2 [B,[A,AB]] + y_3 [B,[B,AB]]."""
    a, b = ser.gen(0), ser.gen(1)
    ab = ser.lie(a, b)
    basis = [ab]
    if len(y) > 1:
        basis += [
            ser.lie(a, ser.lie(a, ab)),
            ser.lie(b, ser.lie(a, ab)),
            ser.lie(b, ser.lie(b, ab)),
        ]
    out = ser.zero()
    for c, e in zip(y, basis, strict=True):
        out = [u + c * v for u, v in zip(out, e, strict=True)]
    return out


def newton(fun, x, iters=8):
    fd = mpmath.mpf(10) ** -20
    for _ in range(iters):
        r = fun(x)
        cols = []
        for i in range(len(x)):
            xp, xm = list(x), list(x)
            xp[i] += fd
            xm[i] -= fd
            cols.append((fun(xp) - fun(xm)) / (2 * fd))
        jac = mpmath.matrix(np.array(cols).T.tolist())
        dx = mpmath.lu_solve(jac.T * jac, -(jac.T * mpmath.matrix(list(r))))
        x = [x[i] + dx[i] for i in range(len(x))]
    return x, max(abs(v) for v in fun(x))


def kernel_from(table, free):
    """The kernel's free parameters (the first half of each palindrome, less its closing entry
    and the fixed a_1) back into the full kick and drift sequences."""
    if table.order == 4:
        b0 = free[0]
        return [b0, mpmath.mpf(1) / 2 - b0, mpmath.mpf(1) / 2 - b0, b0], [
            mpmath.mpf("-0.175"),
            1 - 2 * mpmath.mpf("-0.175"),
            mpmath.mpf("-0.175"),
        ]
    b0, b1, b2, a2 = free
    a1 = mpmath.mpf("0.16")
    b3 = 1 - 2 * (b0 + b1 + b2)
    a3 = mpmath.mpf(1) / 2 - a1 - a2
    return [b0, b1, b2, b3, b2, b1, b0], [a1, a2, a3, a3, a2, a1]


def derive(table) -> None:
    p = table.order
    ser = Series(p - 1)
    nk = 1 if p == 4 else 4
    nl = 1 if p == 4 else 4
    k0 = [table.kick[0]] if p == 4 else [table.kick[0], table.kick[1], table.kick[2]]
    k0 = k0 + ([] if p == 4 else [table.drift[1]])

    def kernel_residual(x):
        kick, drift = kernel_from(table, x[:nk])
        big_p = lie_p(ser, x[nk:])
        k = ser.sequence(kick, drift)
        m = ser.mul(ser.mul(ser.exp(big_p), k), ser.exp([-v for v in big_p]))
        log = ser.log(m)
        return np.concatenate([log[d] for d in range(2, p)])

    # starting values: the table's kernel and P, rounded to 8 digits (P from the first search)
    mpmath.mp.dps = 45
    p_start = (
        ["0.04710035"] if p == 4 else ["-0.05270632", "0.00044737", "0.00513351", "0.00082550"]
    )
    x = [mpmath.mpf(round(v, 8)) for v in k0] + [mpmath.mpf(v) for v in p_start[:nl]]
    x, res = newton(kernel_residual, x, 12)
    print(f"{table.key}: kernel residual {mpmath.nstr(res, 3)}")
    for v in x:
        print("  ", mpmath.nstr(v, 40))
    target = lie_p(ser, x[nk:])
    m = len(table.post_drift)
    # The processors have more coefficients than conditions (7 for 5, 15 for 14): the first
    # `held` kicks stay at the table's values, the others are solved for.
    held = 2 if p == 4 else 1
    fixed = [mpmath.mpf(v) for v in table.post_kick[:held]]

    def processor_residual(z):
        z = fixed + list(z)
        log = ser.log(ser.sequence(z[: m + 1], z[m + 1 :]))
        return np.concatenate([log[d] - target[d] for d in range(1, p)])

    z0 = [mpmath.mpf(round(v, 8)) for v in (table.post_kick + table.post_drift)[held:]]
    z, res = newton(processor_residual, z0, 6)
    z = fixed + z
    drift = max(abs(a - b) for a, b in zip(z, table.post_kick + table.post_drift, strict=True))
    print(f"{table.key}: largest change from the table's doubles {mpmath.nstr(drift, 3)}")
    print(f"{table.key}: processor residual {mpmath.nstr(res, 3)}")
    for v in z:
        print("  ", mpmath.nstr(v, 40))


if __name__ == "__main__":
    for t in TABLES:
        derive(t)
