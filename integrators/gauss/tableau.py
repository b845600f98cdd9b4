"""Butcher tableaux of the Gauss-Legendre collocation methods, as exact closed forms.

One stage is the implicit midpoint rule (c = 1/2, a = 1/2, b = 1; Hairer, Lubich and Wanner,
Geometric Numerical Integration, 2006, sec. II.1.1 and II.1.3 [from memory]): order 2,
symplectic, and like every Gauss method it keeps quadratic first integrals.

Source: J. C. Butcher, "Implicit Runge-Kutta processes", Math. Comp. 18 (1964) 50-64; the same
tables are printed in E. Hairer, G. Wanner, Solving Ordinary Differential Equations II, sec. IV.5
[from memory] (Tables 5.1 and 5.2), and in E. Hairer, C. Lubich, G. Wanner, Geometric Numerical
Integration, sec. II.1.3 [from memory]. The nodes c_i are the zeros of the shifted Legendre
polynomial of degree s on [0, 1].

Every entry is r + s * sqrt(d) with rationals r, s and one radicand d per table (3 for two stages,
15 for three), evaluated once in 40-digit decimal arithmetic. The nodes c are rounded to the
nearest double. The weights b and the matrix A are not: they are chosen as doubles, each within
a few units in the last place of the true value, for which the symplecticity condition
b_i a_ij + b_j a_ji = b_i b_j holds exactly (checked in rational arithmetic). Correctly rounded
tables miss it by about 1e-17, and that defect is a systematic energy change of
-h^2 sum_ij m_ij F_i.C F_j per step for a quadratic invariant y.C y, the same sign every step,
which turns the round-off of a long run from a random walk into a linear drift (E. Hairer,
R. I. McLachlan, A. Razakarivony, "Achieving Brouwer's law with implicit Runge-Kutta methods",
BIT 48 (2008) 231-243, sec. 3, from memory: there by splitting each coefficient into a short
float and a small correction; here by exact floats, which costs nothing per step). The tests
check the tables against nodes and weights computed independently (numpy's Gauss-Legendre rule
and the collocation conditions) and the condition itself.
"""

from __future__ import annotations

import math
from decimal import Context, Decimal
from fractions import Fraction

import numpy as np

# (rational part, coefficient of sqrt(radicand)), as exact fraction strings.
GAUSS1 = {
    "radicand": 1,  # no irrational entries: the square-root parts are all zero
    "order": 2,
    "c": [("1/2", "0")],
    "b": [("1", "0")],
    "a": [[("1/2", "0")]],
}

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


def _exact(entry: tuple[str, str], root: Decimal) -> Fraction:
    """The entry to 40 digits, as a fraction (exact for the rational entries)."""
    r, s = (Fraction(x) for x in entry)
    if s == 0:
        return r
    rd = _CTX.divide(Decimal(r.numerator), Decimal(r.denominator))
    sd = _CTX.divide(Decimal(s.numerator), Decimal(s.denominator))
    return Fraction(_CTX.add(rd, _CTX.multiply(sd, root)))


def _value(entry: tuple[str, str], root: Decimal) -> float:
    return float(_exact(entry, root))


def _is_double(x: Fraction) -> bool:
    return Fraction(float(x)) == x


# How far (in doublings of the last place) a coefficient may be coarsened so that its partner
# in the symplecticity condition comes out as an exact double. Two or three steps suffice for
# the tables here (the ratios of the weights are 1 and 5/8); the cap makes a table for which
# no such doubles exist fail loudly instead of silently keeping the defect.
MAX_COARSENING = 8


def _on_grid(x: Fraction, quantum: Fraction) -> Fraction:
    return round(x / quantum) * quantum


def symplectic_doubles(b: list[Fraction], a: list[list[Fraction]]):
    """Doubles (b, A) close to the exact (b, A) with b_i a_ij + b_j a_ji - b_i b_j = 0 exactly.

    b: the weights are a common double beta times the exact ratios b_i / b_k (k the largest),
    beta rounded to the coarsest of the first grids on which every product is a double.
    a_ii = b_i / 2 (exact for doubles; Gauss tables have it). For i < j the smaller of a_ij,
    a_ji in magnitude (the finer grid) is rounded, to coarser grids if needed, until its
    partner b_i (b_j - a_ij) / b_j (or the mirror) is an exact double. Returns (b, A) as
    lists of floats; raises ValueError if a step fails."""
    s = len(b)
    k = max(range(s), key=lambda i: b[i])
    ratios = [bi / b[k] for bi in b]
    quantum = Fraction(math.ulp(float(b[k])))
    for _ in range(MAX_COARSENING):
        beta = _on_grid(b[k], quantum)
        bf = [r * beta for r in ratios]
        if all(_is_double(x) for x in bf):
            break
        quantum *= 2
    else:
        raise ValueError("no doubles for the weights with their exact ratios")
    af = [[Fraction(0)] * s for _ in range(s)]
    for i in range(s):
        if a[i][i] != b[i] / 2:
            raise ValueError(f"a_{i}{i} is not b_{i} / 2")
        af[i][i] = bf[i] / 2
        for j in range(i + 1, s):
            # free entry (u, v) = indices of the entry rounded; (v, u) follows from it
            u, v = (i, j) if abs(a[i][j]) <= abs(a[j][i]) else (j, i)
            quantum = Fraction(math.ulp(float(a[u][v])))
            for _ in range(MAX_COARSENING):
                free = _on_grid(a[u][v], quantum)
                partner = bf[u] * (bf[v] - free) / bf[v]
                if _is_double(partner):
                    break
                quantum *= 2
            else:
                raise ValueError(f"no doubles for a_{i}{j}, a_{j}{i}")
            af[u][v] = free
            af[v][u] = partner
    for i in range(s):
        for j in range(s):
            if bf[i] * af[i][j] + bf[j] * af[j][i] != bf[i] * bf[j]:
                raise ValueError("symplecticity condition not exact")
    return [float(x) for x in bf], [[float(x) for x in row] for row in af]


def weight_pairs(b: list[Fraction]) -> tuple[list[float], list[float]]:
    """Each weight as an unevaluated sum of two doubles, hi + lo, hi the double nearest b_i and
    lo the double nearest the rest: hi + lo is b_i to about 2^-106 relative, so the weights sum
    to 1 within about 1e-32 whatever their ratios."""
    hi = [float(x) for x in b]
    lo = [float(x - Fraction(h)) for x, h in zip(b, hi, strict=True)]
    return hi, lo


def ratio_doubles(b: list[Fraction], a: list[list[Fraction]]) -> list[list[float]]:
    """The ratios mu_ij = a_ij / b_j as doubles with mu_ii = 1/2 and mu_ij + mu_ji = 1 exactly.

    In the form Y_i = y_n + sum_j mu_ij W_j, y_{n+1} = y_n + sum_j W_j with W_j = h b_j f(Y_j),
    the symplecticity condition b_i a_ij + b_j a_ji = b_i b_j is mu_ij + mu_ji = 1 (divide by
    b_i b_j), which no longer involves b: the weights may then be carried to any precision and
    the method stays exactly symplectic. For i < j the ratio in [1/2, 2] is rounded to nearest
    and its partner is 1 minus it, exact by Sterbenz's lemma (checked in rationals)."""
    s = len(b)
    mu = [[Fraction(0)] * s for _ in range(s)]
    for i in range(s):
        if a[i][i] != b[i] / 2:
            raise ValueError(f"a_{i}{i} is not b_{i} / 2")
        mu[i][i] = Fraction(1, 2)
        for j in range(i + 1, s):
            r = a[i][j] / b[j]
            u, v = (i, j) if Fraction(1, 2) <= r <= 2 else (j, i)
            big = Fraction(float(a[u][v] / b[v]))
            if not Fraction(1, 2) <= big <= 2:
                raise ValueError(f"neither mu_{i}{j} nor mu_{j}{i} is in [1/2, 2]")
            mu[u][v] = big
            mu[v][u] = Fraction(1.0 - float(big))
            if mu[u][v] + mu[v][u] != 1:
                raise ValueError(f"mu_{i}{j} + mu_{j}{i} is not exactly 1")
    return [[float(x) for x in row] for row in mu]


class Tableau:
    """Float arrays of one table: a (s*s, row major), b (s), c (s), and the matrix e (s*s) that
    extrapolates the previous step's collocation polynomial to a starting guess for the next
    step's stages (see `extrapolation_matrix`).

    exact_symplectic=False gives the correctly rounded b and A instead, which miss the
    symplecticity condition by about 1e-17 (what a standard implementation uses; the round-off
    benchmark runs it as a contrast, no method is registered with it)."""

    def __init__(self, table: dict, exact_symplectic: bool = True) -> None:
        root = _CTX.sqrt(Decimal(table["radicand"]))
        self.order = int(table["order"])
        self.c = np.array([_value(e, root) for e in table["c"]])
        if exact_symplectic:
            b, rows = symplectic_doubles(
                [_exact(e, root) for e in table["b"]],
                [[_exact(e, root) for e in row] for row in table["a"]],
            )
        else:
            b = [_value(e, root) for e in table["b"]]
            rows = [[_value(e, root) for e in row] for row in table["a"]]
        self.b = np.array(b)
        self.stages = len(self.b)
        # The compensated methods' form (ratio_doubles, weight_pairs): mu (s*s, row major) and
        # the weights as hi + lo. The plain update keeps a and b above.
        b_exact = [_exact(e, root) for e in table["b"]]
        a_exact = [[_exact(e, root) for e in row] for row in table["a"]]
        self.mu = np.ascontiguousarray(np.array(ratio_doubles(b_exact, a_exact)).reshape(-1))
        hi, lo = weight_pairs(b_exact)
        self.b_hi = np.array(hi)
        self.b_lo = np.array(lo)
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
        # One node: the Lagrange polynomial is the constant 1 (fromroots refuses no roots).
        lj = (
            np.polynomial.Polynomial.fromroots(others) / np.prod(c[j] - others)
            if s > 1
            else np.polynomial.Polynomial([1.0])
        )
        ij = lj.integ()
        for i in range(s):
            e[i, j] = ij(1.0 + c[i]) - b[j]
    return e
