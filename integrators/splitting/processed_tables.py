"""Coefficients of the processed splittings: a kernel K run for every step and a processor P
applied at the output times only, y_n = P K^n P^-1 y_0 (Blanes, Casas and Ros, SIAM J. Sci.
Comput. 21 (1999) 711, for the idea and the effective-order conditions).

The kernel is a symmetric splitting B(b_0 h) A(a_1 h) ... A(a_s h) B(b_s h), of order 2 by
itself; log K = h X + h^3 Y_3 + h^5 Y_5 + ..., X = A + B. P = exp(h^2 P_2 + h^4 P_4) turns it
into exp(ad P) log K = h X + O(h^(p+1)) when Y_3 (and, for p = 6, the degree-5 part left after
P_2) lies in the image of ad X; that is one condition on the kernel for p = 4 and four for p = 6,
against two and six for a method of that order without processing.

All the numbers below are DERIVED HERE (the published tables were not at hand): the kernel and
the Lie element P from the conditions above, then a processor composition B(y_0 h) A(z_1 h) ...
B(y_m h) whose logarithm is h^2 P_2 + h^4 P_4 + O(h^(p)) with nothing at odd degrees, both by
Newton's method in the free associative algebra on {A, B} truncated at degree p - 1, in mpmath
at 45 digits (residuals below 1e-45); integrators/splitting/processed_derivation.py repeats the
Newton iterations from the values rounded to 8 digits (the processors' spare coefficients held)
and lands within 1e-16 of the doubles below. tests/test_processed.py checks the conditions
independently: the effective order on random matrices (mpmath matrix exponentials) and on the
heavy top against the exact solution and a 34-digit Taylor reference.
Of each family of solutions we kept one with small coefficients: for p = 4 the free drift
a_1 = -0.175 minimises the size of the degree-5 error left after processing (a scan), for p = 6
a_1 = 0.16 is the rounded value of the smallest of eight solutions found.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class ProcessedTable:
    key: str  # method name suffix
    order: int  # effective order at the output times
    kick: tuple[float, ...]  # kernel b_0..b_s
    drift: tuple[float, ...]  # kernel a_1..a_s
    post_kick: tuple[float, ...]  # processor y_0..y_m
    post_drift: tuple[float, ...]  # processor z_1..z_m
    title: str = ""

    def kernel(self) -> tuple[np.ndarray, np.ndarray]:
        return np.array(self.kick, dtype=np.float64), np.array(self.drift, dtype=np.float64)

    def post(self) -> tuple[np.ndarray, np.ndarray]:
        """The post-processor P, applied at output times."""
        return np.array(self.post_kick), np.array(self.post_drift)

    def pre(self) -> tuple[np.ndarray, np.ndarray]:
        """P^-1, applied once at the start: the processor's sequence reversed and negated."""
        return -np.array(self.post_kick[::-1]), -np.array(self.post_drift[::-1])

    @property
    def stages(self) -> int:
        return len(self.drift)


def _sym_kicks(half: list[str], total: float) -> tuple[float, ...]:
    """A palindrome of kicks whose middle entry (odd count) makes the sum `total`."""
    import mpmath

    with mpmath.workdps(45):
        h = [mpmath.mpf(v) for v in half]
        mid = total - 2 * mpmath.fsum(h)
        return tuple(float(v) for v in h + [mid] + h[::-1])


def _sym_even(half: list[str], total: float) -> tuple[float, ...]:
    """An even palindrome whose two centre entries make the sum `total`."""
    import mpmath

    with mpmath.workdps(45):
        h = [mpmath.mpf(v) for v in half]
        c = (total - 2 * mpmath.fsum(h)) / 2
        return tuple(float(v) for v in h + [c, c] + h[::-1])


def _floats(values: list[str]) -> tuple[float, ...]:
    return tuple(float(v) for v in values)


TABLES = (
    ProcessedTable(
        key="proc4",
        order=4,
        # kernel: B(b0) A(a1) B(b1) A(1 - 2 a1) B(b1) A(a1) B(b0), b1 = 1/2 - b0, a1 = -0.175
        kick=_sym_even(["0.6762090336608819342073503451239063352764"], 1.0),
        drift=_sym_kicks(["-0.175"], 1.0),
        post_kick=_floats(
            [
                "-0.07594954279449505576590758085426539627539",
                "0.1743206210852388982840651037216218118472",
                "-0.2168453334298564041269066577318859753511",
                "0.1184742551391125616087491348645295597793",
            ]
        ),
        post_drift=_floats(
            [
                "-0.1277316980474955694572279509319453406737",
                "0.2422560987256222883366437023641683002591",
                "-0.1145244006781267188794157514322229595854",
            ]
        ),
        title="processed splitting of effective order 4, kernel of 3 stages (order 2 alone)",
    ),
    ProcessedTable(
        key="proc6",
        order=6,
        # kernel: kicks b0 b1 b2 b3 b2 b1 b0 (b3 closes the sum), drifts a1 a2 a3 a3 a2 a1,
        # a1 = 0.16, a3 = 1/2 - a1 - a2
        kick=_sym_kicks(
            [
                "1.133924874602155026948337231343501787224",
                "-0.08478685353341109652090669988220169553101",
                "-0.9596692150367793729451652928903858109009",
            ],
            1.0,
        ),
        drift=_sym_even(["0.16", "-0.2046880308140728474782638969500371319607"], 1.0),
        post_kick=_floats(
            [
                "-0.4915343135669357435930989025876630248019",
                "0.004928002000833761719354702526964507290718",
                "0.06392729812009270431964691573234824288834",
                "0.3257094784355111350955911628625844241807",
                "0.6638515132720204881720484000379779713495",
                "-0.02594533692961231790827953846187504259962",
                "-0.6591755471674428185479171546600981156926",
                "0.1182389058355327907426544145497610373849",
            ]
        ),
        post_drift=_floats(
            [
                "0.4108208456758097532577583532292217429494",
                "-0.7680135467277719927586037514200673076635",
                "0.4862164451447007800811972517367290655093",
                "-0.2023151537748047531716525080628459351683",
                "0.5210477555519910348454526536252985114355",
                "-0.5869661558012593213883207134381194208627",
                "0.1392098099313344991341687143297833438003",
            ]
        ),
        title="processed splitting of effective order 6, kernel of 6 stages (order 2 alone)",
    ),
)
