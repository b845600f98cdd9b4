"""Coefficient tables of the splitting methods, as data, each with its source.

Every table is turned into one sequence of sub-flow coefficients

    B(b_0 h) A(a_1 h) B(b_1 h) A(a_2 h) ... A(a_s h) B(b_s h)

(B = flow_b, the kick; A = flow_a, the drift or free flow), which the one kernel in
splitting_kernels.py runs. Two kinds of table:

- a composition of the symmetric second-order Strang step S(h) = B(h/2) A(h) B(h/2) with weights
  gamma_1..gamma_s: S(gamma_s h) ... S(gamma_1 h). Adjacent half kicks merge, so
  a_i = gamma_i, b_0 = gamma_1/2, b_i = (gamma_i + gamma_(i+1))/2, b_s = gamma_s/2.
- a splitting table given directly by its coefficients (Blanes and Moan 2002), with
  the outer flow of the published scheme on B.

Decimal strings are kept as printed in the source; the closed forms are evaluated here.
"""

from __future__ import annotations

from dataclasses import dataclass

import mpmath
import numpy as np

_HLW = (
    "reprinted in Hairer, Lubich and Wanner, Geometric Numerical Integration, 2nd ed. (2006), "
    "Sec. V.3.2 [from memory]"
)


@dataclass(frozen=True)
class SplittingTable:
    key: str  # the suffix of the method name ("" for the Strang step itself)
    order: int
    kind: str  # "composition" (weights of the Strang step) or "splitting" (a, b directly)
    coefficients: tuple[float, ...]  # composition: all gamma_i; splitting: see `b`
    b: tuple[float, ...] = ()  # splitting only: the inner-flow coefficients (ours: A)
    source: str = ""
    title: str = ""

    def sequence(self) -> tuple[np.ndarray, np.ndarray]:
        """(kick, drift): kick coefficients b_0..b_s (s + 1 of them), drift a_1..a_s."""
        if self.kind == "composition":
            g = np.array(self.coefficients, dtype=np.float64)
            kick = np.empty(len(g) + 1)
            kick[0] = 0.5 * g[0]
            kick[1:-1] = 0.5 * (g[:-1] + g[1:])
            kick[-1] = 0.5 * g[-1]
            return kick, g.copy()
        # splitting: outer coefficients on B (s + 1), inner on A (s)
        return (
            np.array(self.coefficients, dtype=np.float64),
            np.array(self.b, dtype=np.float64),
        )

    @property
    def stages(self) -> int:
        """Number of A (drift / free flow) evaluations per step."""
        return len(self.coefficients) if self.kind == "composition" else len(self.b)


def _palindrome(half: list[float], middle: float | None = None) -> tuple[float, ...]:
    """gamma_1..gamma_k, [middle], gamma_k..gamma_1."""
    seq = list(half) + ([middle] if middle is not None else []) + list(reversed(half))
    return tuple(seq)


def _palindrome_closing(half: list[float]) -> tuple[float, ...]:
    """A symmetric table whose centre coefficient makes the sum one."""
    return _palindrome(half, 1.0 - 2.0 * float(np.sum(np.array(half, dtype=np.longdouble))))


def _palindrome_half(half: list[float]) -> tuple[float, ...]:
    """An even palindrome whose two centre coefficients make the sum one."""
    centre = 0.5 - float(np.sum(np.array(half, dtype=np.longdouble)))
    return tuple(half) + (centre, centre) + tuple(reversed(half))


def triple_jump(order: int) -> tuple[float, ...]:
    """Recursive triple jump to `order` (4, 6, 8): each level composes the method of order 2k
    as Phi(g1 h) Phi(g0 h) Phi(g1 h), g1 = 1/(2 - 2^(1/(2k+1))), g0 = 1 - 2 g1.
    Closed form: Yoshida, Phys. Lett. A 150 (1990) 262, eq. (4.14)-(4.15) (from memory);
    Suzuki, Phys. Lett. A 146 (1990) 319; Creutz and Gocksch, PRL 63 (1989) 9."""
    # In 40 digits, rounded once, so that each weight is the double nearest its closed form.
    with mpmath.workdps(40):
        weights = [mpmath.mpf(1)]
        for k in range(1, order // 2):
            x = mpmath.root(2, 2 * k + 1)
            g1 = 1 / (2 - x)
            g0 = -x / (2 - x)
            weights = [w * g for g in (g1, g0, g1) for w in weights]
        weights = [float(w) for w in weights]
    return tuple(weights)


def suzuki_fractal4() -> tuple[float, ...]:
    """Suzuki's five-stage fourth-order fractal: p, p, 1 - 4p, p, p, p = 1/(4 - 4^(1/3)).
    Suzuki, Phys. Lett. A 146 (1990) 319, eq. (3.7)-(3.8) (from memory)."""
    with mpmath.workdps(40):
        p = 1 / (4 - mpmath.cbrt(4))
        return (float(p), float(p), float(1 - 4 * p), float(p), float(p))


TABLES: tuple[SplittingTable, ...] = (
    SplittingTable(
        key="",
        order=2,
        kind="composition",
        coefficients=(1.0,),
        source="Strang splitting, SIAM J. Numer. Anal. 5 (1968) 506 (common practice)",
        title="Strang step B(h/2) A(h) B(h/2)",
    ),
    SplittingTable(
        key="tj4",
        order=4,
        kind="composition",
        coefficients=triple_jump(4),
        source="triple jump, closed form: Yoshida, Phys. Lett. A 150 (1990) 262; "
        "Suzuki, Phys. Lett. A 146 (1990) 319",
        title="triple jump of the Strang step, 3 stages",
    ),
    SplittingTable(
        key="s4",
        order=4,
        kind="composition",
        coefficients=suzuki_fractal4(),
        source="Suzuki, Phys. Lett. A 146 (1990) 319, five-stage fractal, closed form",
        title="Suzuki's fractal composition, 5 stages",
    ),
    SplittingTable(
        key="bm4",
        order=4,
        kind="splitting",
        # a_1..a_4 of the published scheme, palindromic, a_4 = 1 - 2 (a_1 + a_2 + a_3)
        coefficients=_palindrome_closing(
            [0.0792036964311957, 0.353172906049774, -0.0420650803577195]
        ),
        # b_1..b_3, palindromic, b_3 = 1/2 - (b_1 + b_2)
        b=_palindrome_half([0.209515106613362, -0.143851773179818]),
        source="Blanes and Moan, J. Comput. Appl. Math. 142 (2002) 313, Table 2, "
        "PRK method S6 (order 4, 6 stages)",
        title="Blanes-Moan optimised splitting, 6 stages",
    ),
    SplittingTable(
        key="tj6",
        order=6,
        kind="composition",
        coefficients=triple_jump(6),
        source="recursive triple jump, closed form: Yoshida, Phys. Lett. A 150 (1990) 262",
        title="triple jump of the triple jump, 9 stages",
    ),
    SplittingTable(
        key="y6",
        order=6,
        kind="composition",
        coefficients=_palindrome(
            [
                0.78451361047755726381949763,
                0.23557321335935813368479318,
                -1.17767998417887100694641568,
            ],
            1.31518632068391121888424973,
        ),
        source="Yoshida, Phys. Lett. A 150 (1990) 262, solution A of order 6; " + _HLW,
        title="Yoshida's order-6 composition, 7 stages",
    ),
    SplittingTable(
        key="kl6",
        order=6,
        kind="composition",
        coefficients=_palindrome(
            [
                0.39216144400731413927925056,
                0.33259913678935943859974864,
                -0.70624617255763935980996482,
                0.08221359629355080023149045,
            ],
            0.79854399093482996339895035,
        ),
        source="Kahan and Li, Math. Comp. 66 (1997) 1089, s9odr6a; " + _HLW,
        title="Kahan-Li optimised order-6 composition, 9 stages",
    ),
    SplittingTable(
        key="bm6",
        order=6,
        kind="splitting",
        coefficients=_palindrome_closing(
            [
                0.0502627644003922,
                0.413514300428344,
                0.0450798897943977,
                -0.188054853819569,
                0.541960678450780,
            ]
        ),
        b=_palindrome_half(
            [0.148816447901042, -0.132385865767784, 0.067307604692185, 0.432666402578175]
        ),
        source="Blanes and Moan, J. Comput. Appl. Math. 142 (2002) 313, Table 2, "
        "PRK method S10 (order 6, 10 stages)",
        title="Blanes-Moan optimised splitting, 10 stages",
    ),
    SplittingTable(
        key="tj8",
        order=8,
        kind="composition",
        coefficients=triple_jump(8),
        source="recursive triple jump, closed form: Yoshida, Phys. Lett. A 150 (1990) 262",
        title="triple jump to order 8, 27 stages",
    ),
    SplittingTable(
        key="m8",
        order=8,
        kind="composition",
        coefficients=_palindrome(
            [
                0.74167036435061295344822780,
                -0.40910082580003159399730010,
                0.19075471029623837995387626,
                -0.57386247111608226665638773,
                0.29906418130365592384446354,
                0.33462491824529818378495798,
                0.31529309239676659663205666,
            ],
            -0.79688793935291635401978884,
        ),
        source="McLachlan, SIAM J. Sci. Comput. 16 (1995) 151, order 8, 15 stages; " + _HLW,
        title="McLachlan's order-8 composition, 15 stages",
    ),
    SplittingTable(
        key="kl8",
        order=8,
        kind="composition",
        coefficients=_palindrome(
            [
                0.13020248308889008087881763,
                0.56116298177510838456196441,
                -0.38947496264484728640807860,
                0.15884190655515560089621075,
                -0.39590389413323757733623154,
                0.18453964097831570709183254,
                0.25837438768632204729397911,
                0.29501172360931029887096624,
            ],
            -0.60550853383003451169892108,
        ),
        source="Kahan and Li, Math. Comp. 66 (1997) 1089, s17odr8a; " + _HLW,
        title="Kahan-Li optimised order-8 composition, 17 stages",
    ),
)

TABLE_BY_KEY = {t.key: t for t in TABLES}
