"""Butcher tableaux of the Gauss-Legendre collocation methods, as exact closed forms.

Source: J. C. Butcher, "Implicit Runge-Kutta processes", Math. Comp. 18 (1964) 50-64; the same
tables are printed in E. Hairer, G. Wanner, Solving Ordinary Differential Equations II, sec. IV.5
(Tables 5.1 and 5.2), and in E. Hairer, C. Lubich, G. Wanner, Geometric Numerical Integration,
sec. II.1.3. The nodes c_i are the zeros of the shifted Legendre polynomial of degree s on [0, 1].

Every entry is r + s * sqrt(d) with rationals r, s and one radicand d per table (3 for two stages,
15 for three). Each is evaluated once in 40-digit decimal arithmetic and then rounded to the
nearest double, so the float tables are correctly rounded; the tests check them against nodes
and weights computed independently (numpy's Gauss-Legendre rule and the collocation conditions).
"""

from __future__ import annotations

from decimal import Context, Decimal
from fractions import Fraction

import numpy as np

# (rational part, coefficient of sqrt(radicand)), as exact fraction strings.
GAUSS2 = {
    "radicand": 3,
    "order": 4,
    "c": [("1/2", "-1/6"), ("1/2", "1/6")],
    "b": [("1/2", "0"), ("1/2", "0")],
    "a": [
        [("1/4", "0"), ("1/4", "-1/6")],
        [("1/4", "1/6"), ("1/4", "0")],
    ],
}

GAUSS3 = {
    "radicand": 15,
    "order": 6,
    "c": [("1/2", "-1/10"), ("1/2", "0"), ("1/2", "1/10")],
    "b": [("5/18", "0"), ("4/9", "0"), ("5/18", "0")],
    "a": [
        [("5/36", "0"), ("2/9", "-1/15"), ("5/36", "-1/30")],
        [("5/36", "1/24"), ("2/9", "0"), ("5/36", "-1/24")],
        [("5/36", "1/30"), ("2/9", "1/15"), ("5/36", "0")],
    ],
}

_CTX = Context(prec=40)


def _value(entry: tuple[str, str], root: Decimal) -> float:
    r, s = (Fraction(x) for x in entry)
    rd = _CTX.divide(Decimal(r.numerator), Decimal(r.denominator))
    sd = _CTX.divide(Decimal(s.numerator), Decimal(s.denominator))
    return float(_CTX.add(rd, _CTX.multiply(sd, root)))


class Tableau:
    """Float arrays of one table: a (s*s, row major), b (s), c (s), and the matrix e (s*s) that
    extrapolates the previous step's collocation polynomial to a starting guess for the next
    step's stages (see `extrapolation_matrix`)."""

    def __init__(self, table: dict) -> None:
        root = _CTX.sqrt(Decimal(table["radicand"]))
        self.order = int(table["order"])
        self.c = np.array([_value(e, root) for e in table["c"]])
        self.b = np.array([_value(e, root) for e in table["b"]])
        rows = [[_value(e, root) for e in row] for row in table["a"]]
        self.stages = len(self.b)
        self.a = np.ascontiguousarray(np.array(rows).reshape(-1))
        self.e = np.ascontiguousarray(extrapolation_matrix(self.c, self.b).reshape(-1))


def extrapolation_matrix(c: np.ndarray, b: np.ndarray) -> np.ndarray:
    """E with Z_i = h sum_j E_ij F_j: the stages of the last step's collocation polynomial u,
    u(t0 + tau h) = y0 + h sum_j F_j int_0^tau l_j, taken at tau = 1 + c_i, minus u(1) = y1.

    l_j are the Lagrange polynomials on the nodes c. Only a starting guess, so plain float
    arithmetic is enough; the fixed-point iteration removes its error.
    """
    s = len(c)
    e = np.empty((s, s))
    for j in range(s):
        others = np.delete(c, j)
        lj = np.polynomial.Polynomial.fromroots(others) / np.prod(c[j] - others)
        ij = lj.integ()
        for i in range(s):
            e[i, j] = ij(1.0 + c[i]) - b[j]
    return e
