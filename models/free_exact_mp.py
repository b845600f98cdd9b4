"""The exact motion of a torque-free rigid body in mpmath's multiprecision arithmetic, evaluated
directly at each time from t = 0 (no stepping): the reference of the free-body cases.

The formulas are those of free_asymmetric.py (its docstring derives them; Landau and Lifshitz,
Mechanics, sec. 37, for the momentum), written for an absolute time instead of one step:

    m_a = A_a cn(tau),  m_b = A_b sn(tau),  m_c = s |A_c| dn(tau),   tau = tau0 + tau' t,
    q(t) = q(0) u(m(0))^* r(psi(t) - psi(0)) u(m(t)),
    psi(t) - psi(0) = 2 E t / L - e s beta [J1 - alpha J2]_(phi(0))^(phi(t)),   phi = am(tau),

with the constants (k^2, nu, alpha, beta, the rate tau') computed once from the start. The
phase is reduced by whole half-periods: am(tau + 2 K) = am(tau) + pi, and J1, J2 advance by
pi / sqrt(1 + nu) and 2 J2(pi / 2) per half-period, so the cost of a time does not grow with it.
J2 on a reduced amplitude is F - (nu + k^2) / 3 s^3 R_J(c^2, dn^2, 1, 1 + nu s^2) (DLMF
19.25.14 with n = -nu), and F there is the reduced tau itself. am by the arithmetic-geometric
mean and its descent (Abramowitz and Stegun, Handbook of Mathematical Functions, 16.4.2-16.4.3),
R_F and R_J from carlson.py.

Two equal moments (exactly equal doubles): L is fixed in space and m turns uniformly about the
odd axis o, so (common practice; DESIGN.md's free flow of a symmetric body)

    q(t) = Rot(L / |L|, |L| t / I_p) q(0) Rot(e_o, c t)
         = q(0) Rot(m(0) / |m|, |L| t / I_p) Rot(e_o, c t),      c = (1 / I_o - 1 / I_p) m_o,
    m(t) = Rot(e_o, -c t) m(0),

I_p the moment of the pair. Other branches: |m| = 0 (nothing moves); m along a principal axis
(a steady rotation about it); on the separatrix exactly (L^2 = 2 E I_mid: am(u | 1) =
atan(sinh u), no half-periods, A&S 16.15). The separatrix is recognised with exact arithmetic,
so that it is never mistaken for a nearby orbit or the other way round.

Every number of the body and the start enters as the exact binary value of its double. The
times are exact doubles too. Call with the working precision wanted: FreeMotion(.., dps) keeps
its own precision (mp.workdps) for the set-up and every evaluation.
"""

from __future__ import annotations

import mpmath as mp

from . import carlson

# Bits enough to form the products of up to four doubles exactly (53 bits each): the tests
# that decide a branch (on the separatrix, on an axis) are exact, never rounded.
EXACT_BITS = 4 * 53 + 8


def _qmul(a, b):
    a0, a1, a2, a3 = a
    b0, b1, b2, b3 = b
    return (
        a0 * b0 - a1 * b1 - a2 * b2 - a3 * b3,
        a0 * b1 + a1 * b0 + a2 * b3 - a3 * b2,
        a0 * b2 - a1 * b3 + a2 * b0 + a3 * b1,
        a0 * b3 + a1 * b2 - a2 * b1 + a3 * b0,
    )


def _conj(a):
    return (a[0], -a[1], -a[2], -a[3])


def _turn(angle, axis):
    """The unit quaternion of a turn by `angle` about the unit vector `axis`."""
    s = mp.sin(angle / 2)
    return (mp.cos(angle / 2), s * axis[0], s * axis[1], s * axis[2])


def _rotate(q, v):
    """q v conj(q) for a unit q."""
    return _qmul(_qmul(q, (mp.mpf(0), v[0], v[1], v[2])), _conj(q))[1:]


def amplitude(u, m, mc):
    """am(u | m) for real u and 0 <= m < 1 (mc = 1 - m > 0 given, so that m near 1 keeps its
    digits): the AGM and its descent (A&S 16.4.2-16.4.3), the asin as an atan2."""
    if m == 0:
        return +u
    tol = mp.ldexp(mp.mpf(1), -mp.mp.prec)
    a, b, c = mp.mpf(1), mp.sqrt(mc), mp.sqrt(m)
    ratios = []
    while abs(c) > tol * a:
        a, b, c = (a + b) / 2, mp.sqrt(a * b), (a - b) / 2
        ratios.append(c / a)
    phi = mp.ldexp(a * u, len(ratios))
    for r in reversed(ratios):
        x = r * mp.sin(phi)
        phi = (phi + mp.atan2(x, mp.sqrt((1 - x) * (1 + x)))) / 2
    return phi


def torque_free(body) -> bool:
    """No gravity torque acts: the centre of mass at the pivot, or no gravity."""
    return body.gravity == 0.0 or all(c == 0.0 for c in body.com)


class FreeMotion:
    """The exact free motion of `body` from the body-form start y0 = (q, m) (doubles) at `dps`
    digits. state(t) gives the body-form state (7 mpf) at the double time t >= 0."""

    def __init__(self, body, y0, dps: int):
        if not torque_free(body):
            raise ValueError(
                "a gravity torque acts on this body (centre of mass off the pivot): its motion "
                "is not the free flow"
            )
        if len(y0) != 7:
            raise ValueError(f"a body-form state has 7 components, got {len(y0)}")
        self.dps = int(dps)
        with mp.workdps(self.dps):
            self.inertia = [mp.mpf(float(v)) for v in body.inertia]
            # q(t) = q(0) X(t) with X a unit quaternion, as the equations q' = q (0, w) / 2 have
            # it: the double start's |q| (1 to round-off) is kept, not normalised away
            self.q0 = tuple(mp.mpf(float(v)) for v in y0[:4])
            self.m0 = tuple(mp.mpf(float(v)) for v in y0[4:7])
            self._setup()

    # -- set-up ------------------------------------------------------------------------------

    def _setup(self) -> None:
        inertia, m = self.inertia, self.m0
        if all(v == 0 for v in m):
            self.kind = "rest"
            return
        nonzero = sum(1 for v in m if v != 0)
        pairs = [(i, j) for i in range(3) for j in range(i + 1, 3) if inertia[i] == inertia[j]]
        if pairs:
            self._setup_symmetric(pairs[0])
        elif nonzero == 1:
            self._setup_steady()
        else:
            self._setup_asymmetric()

    def _setup_steady(self) -> None:
        """m along a principal axis: w = I^-1 m is parallel to m, the body turns about it."""
        self.kind = "steady"
        w = [mi / ii for mi, ii in zip(self.m0, self.inertia, strict=True)]
        self.rate = mp.sqrt(sum(v * v for v in w))
        self.axis = tuple(v / self.rate for v in w)

    def _setup_symmetric(self, pair) -> None:
        self.kind = "symmetric"
        o = 3 - pair[0] - pair[1]
        i_p, i_o = self.inertia[pair[0]], self.inertia[o]
        self.lnorm = mp.sqrt(sum(v * v for v in self.m0))
        # Rot(L / |L|, angle) q(0) = q(0) Rot(m(0) / |m(0)|, angle): the turn about the fixed L
        # seen from the start's body axes
        self.mhat = tuple(v / self.lnorm for v in self.m0)
        self.space_rate = self.lnorm / i_p
        self.body_rate = (1 / i_o - 1 / i_p) * self.m0[o]
        self.odd = tuple(mp.mpf(1) if i == o else mp.mpf(0) for i in range(3))

    def _setup_asymmetric(self) -> None:
        inertia, m = self.inertia, self.m0
        lo, mid, hi = sorted(range(3), key=lambda i: inertia[i])
        ib = inertia[mid]
        # the sign of L^2 - 2 E I_mid, exactly: m_lo^2 (I_lo - I_mid) I_hi + m_hi^2 (...) I_lo
        with mp.workprec(EXACT_BITS):
            side = (
                m[lo] ** 2 * (inertia[lo] - ib) * inertia[hi]
                + m[hi] ** 2 * (inertia[hi] - ib) * inertia[lo]
            )
        self.separatrix = side == 0
        c, a = (hi, lo) if side >= 0 else (lo, hi)
        b = mid
        ia, ic = inertia[a], inertia[c]
        ma, mb, mcv = m[a], m[b], m[c]
        if mcv == 0:
            # m_c = 0 on an orbit round c only where m lies along b (the middle axis)
            self._setup_steady()
            return
        self.kind = "asymmetric"
        self.axes = (a, b, c)
        d2 = sum(m[i] ** 2 * (1 - ib / inertia[i]) for i in (a, c))  # L^2 - 2 E I_b
        pp = ma * ma * (ic / ia - 1) + mb * mb * (ic / ib - 1)  # 2 E I_c - L^2
        da = mb * mb * (1 - ia / ib) + mcv * mcv * (1 - ia / ic)  # L^2 - 2 E I_a
        dca, dcb, dba = ic - ia, ic - ib, ib - ia
        self.k2 = dba * pp / (dcb * da)
        self.mc = mp.mpf(0) if self.separatrix else dca * d2 / (dcb * da)
        self.nu = ic * dba / (ia * dcb)
        self.beta = mp.sqrt(ib * dca / (ia * dcb))
        self.amp_a = mp.sqrt(pp * ia / dca)
        self.amp_b = mp.sqrt(pp * ib / dcb)
        self.ac2 = da * ic / dca  # A_c^2
        self.lnorm = mp.sqrt(ma * ma + mb * mb + mcv * mcv)
        self.alpha = mp.sqrt(self.ac2) / self.lnorm
        self.s = 1 if mcv > 0 else -1
        self.e = 1 if (b - a) % 3 == 1 else -1
        sdcb = 1 if dcb > 0 else -1
        self.tau_rate = self.e * self.s * sdcb * mp.sqrt(dcb * da / (ia * ib * ic))
        self.e2 = sum(mi * mi / ii for mi, ii in zip(m, inertia, strict=True))  # 2 E
        self.sqrt1nu = mp.sqrt(1 + self.nu)
        # the start's amplitude phi0 = j0 pi + phr, |phr| <= pi/2
        phi0 = mp.atan2(mb / self.beta, ma)
        self.j0 = int(mp.nint(phi0 / mp.pi))
        phr = phi0 - self.j0 * mp.pi
        sr, cr = mp.sin(phr), mp.cos(phr)
        dn2 = self.mc + self.k2 * cr * cr
        f0 = sr * carlson.rf(cr * cr, dn2, 1) if sr != 0 else mp.mpf(0)
        if self.separatrix:
            self.half_tau = self.half_j2 = None  # no half-periods
            self.tau0 = f0  # phi stays j0 pi + am(tau | 1)
        else:
            self.half_tau = 2 * carlson.complete_first(self.mc)  # 2 K
            self.half_j2 = 2 * (
                self.half_tau / 2 - (self.nu + self.k2) / 3 * carlson.rj(0, self.mc, 1, 1 + self.nu)
            )
            self.tau0 = self.j0 * self.half_tau + f0
        self.u0 = self._smallest(m)
        self.j_start = self._j(self.j0, f0, sr, cr)

    # -- evaluation --------------------------------------------------------------------------

    def _smallest(self, m):
        """u(m): the smallest rotation taking m / |m| to z = s e_c (normalised)."""
        a, b, c = self.axes
        z = [mp.mpf(0)] * 3
        z[c] = mp.mpf(self.s)
        cross = (m[1] * z[2] - m[2] * z[1], m[2] * z[0] - m[0] * z[2], m[0] * z[1] - m[1] * z[0])
        w = self.lnorm + abs(m[c])
        n = mp.sqrt(w * w + sum(v * v for v in cross))
        return (w / n, cross[0] / n, cross[1] / n, cross[2] / n)

    def _j(self, turns, tau_r, sr, cr):
        """J1 - alpha J2 at the amplitude turns pi + phr (phr = am(tau_r), sin, cos given)."""
        j1 = mp.atan2(self.sqrt1nu * sr, cr) / self.sqrt1nu
        dn2 = self.mc + self.k2 * cr * cr
        j2 = tau_r - (self.nu + self.k2) / 3 * sr**3 * carlson.rj(
            cr * cr, dn2, 1, 1 + self.nu * sr * sr
        )
        if self.half_j2 is not None and turns:
            j1 += turns * mp.pi / self.sqrt1nu
            j2 += turns * self.half_j2
        return j1 - self.alpha * j2

    def state(self, t) -> list:
        """The body-form state (q0..q3, m1..m3) at the time t (a double, s)."""
        with mp.workdps(self.dps):
            t = mp.mpf(float(t))
            if t < 0:
                raise ValueError(f"time must not be negative, got {t}")
            kind = self.kind
            if kind == "rest" or t == 0:  # at t = 0 the motion is its start, exactly
                return [*self.q0, *self.m0]
            if kind == "steady":
                q = _qmul(self.q0, _turn(self.rate * t, self.axis))
                return [*q, *self.m0]
            if kind == "symmetric":
                body_turn = _turn(self.body_rate * t, self.odd)
                q = _qmul(_qmul(self.q0, _turn(self.space_rate * t, self.mhat)), body_turn)
                return [*q, *_rotate(_conj(body_turn), self.m0)]
            return self._asymmetric(t)

    def _asymmetric(self, t) -> list:
        tau = self.tau0 + self.tau_rate * t
        if self.separatrix:
            turns, tau_r = self.j0, tau
            phr = mp.atan(mp.sinh(tau_r))  # am(u | 1), A&S 16.15
        else:
            turns = int(mp.nint(tau / self.half_tau))
            tau_r = tau - turns * self.half_tau
            phr = amplitude(tau_r, self.k2, self.mc)
        sr, cr = mp.sin(phr), mp.cos(phr)
        sign = -1 if turns % 2 else 1  # cos and sin of turns pi + phr
        a, b, c = self.axes
        m = [mp.mpf(0)] * 3
        m[a] = self.amp_a * sign * cr
        m[b] = self.amp_b * sign * sr
        m[c] = self.s * mp.sqrt(self.ac2 * (self.mc + self.k2 * cr * cr))
        dj = self._j(turns, tau_r, sr, cr) - self.j_start  # (no half-periods on the separatrix)
        dpsi = self.e2 / self.lnorm * t - self.e * self.s * self.beta * dj
        z = [mp.mpf(0)] * 3
        z[c] = mp.mpf(self.s)
        r = _turn(dpsi, z)
        q = _qmul(_qmul(_qmul(self.q0, _conj(self.u0)), r), self._smallest(m))
        return [*q, *m]


def free_states(body, y0, times, dps: int, progress=None) -> list:
    """The body-form states (rows of 7 mpf) of the free body at the times, at `dps` digits;
    progress(done, total) after each time when given."""
    motion = FreeMotion(body, y0, dps)
    out = []
    n = len(times)
    for i, t in enumerate(times):
        out.append(motion.state(t))
        if progress is not None:
            progress(i + 1, n)
    return out
