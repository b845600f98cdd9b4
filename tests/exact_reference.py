"""An independent multiprecision reference for the exact Lagrange-top solution (test helper).

Everything by quadrature at DIGITS decimal digits (mpmath's tanh-sinh): with the substitution
u = u1 + (u2 - u1) sin^2(chi), the time dt = du / sqrt(f(u)) = 2 dchi / sqrt(w(u)) with
w(u) = f(u) / ((u - u1)(u2 - u)), and phi, psi follow from phidot(u) dt and psidot(u) dt
(Goldstein, Classical Mechanics, sec. 5.7, for f(u) and the rates). The integrands are smooth
and peak only at the turning points chi = 0, pi/2 (mod pi), which are kept at the ends of every
quadrature interval. Roots of f by mpmath.polyroots (ascending coefficients, mpmath >= 1.4).
The time t is inverted by Newton's method on the quadrature, whole periods by the period
integrals: no elliptic function and no code of topdrift.models.exact is used. A given double t
is taken as exact.

The start is read from the state independently of the module too: invariants from the
canonical momenta or from L = R m, Euler angles from the rotation matrix.
"""

from __future__ import annotations

import mpmath as mp

DIGITS = 40


def _mp(v):
    return mp.mpf(float(v))


class QuadratureTop:
    """Reference motion from an Euler-form (phi, theta, psi, p_phi, p_theta, p_psi) or body-form
    (q0, q1, q2, q3, m1, m2, m3) start; params (I1, I3, M g l) as doubles. `digits` beyond
    DIGITS for a top that passes close to a pole: the quadrature of the sharply peaked rates
    loses about as many digits as 1 - u2 has leading zeros, and whole periods multiply it."""

    def __init__(self, i1, i3, mgl, y, form="euler", digits=DIGITS):
        self.digits = digits
        with mp.workdps(digits):
            self._setup(_mp(i1), _mp(i3), _mp(mgl), [_mp(v) for v in y], form)

    # ------------------------------------------------------------------ start and constants
    def _setup(self, i1, i3, mgl, y, form):
        if form == "euler":
            phi0, th0, psi0, pphi, pth, ppsi = y
            c, s = mp.cos(th0), mp.sin(th0)
            energy = (
                pth**2 / (2 * i1)
                + (pphi - ppsi * c) ** 2 / (2 * i1 * s**2)
                + ppsi**2 / (2 * i3)
                + mgl * c
            )
            u0, udot0 = c, -s * pth / i1
        else:
            q = y[:4]
            nq = mp.sqrt(sum(v * v for v in q))
            q0, q1, q2, q3 = (v / nq for v in q)
            m1, m2, m3 = y[4:]
            rot = [
                [1 - 2 * (q2**2 + q3**2), 2 * (q1 * q2 - q0 * q3), 2 * (q1 * q3 + q0 * q2)],
                [2 * (q1 * q2 + q0 * q3), 1 - 2 * (q1**2 + q3**2), 2 * (q2 * q3 - q0 * q1)],
                [2 * (q1 * q3 - q0 * q2), 2 * (q2 * q3 + q0 * q1), 1 - 2 * (q1**2 + q2**2)],
            ]
            gam = rot[2]  # R^T e_z: the vertical in body axes
            pphi = m1 * gam[0] + m2 * gam[1] + m3 * gam[2]
            ppsi = m3
            energy = (m1**2 + m2**2) / (2 * i1) + m3**2 / (2 * i3) + mgl * gam[2]
            u0 = gam[2]
            # Gamma' = Gamma x omega: du/dt = Gamma1 w2 - Gamma2 w1
            udot0 = (gam[0] * m2 - gam[1] * m1) / i1
            # R = Rz(phi) Rx(theta) Rz(psi): R e3 = (sin phi sin theta, -cos phi sin theta, .)
            # and e_z^T R = (sin theta sin psi, sin theta cos psi, cos theta)
            phi0 = mp.atan2(rot[0][2], -rot[1][2])
            psi0 = mp.atan2(rot[2][0], rot[2][1])
        alpha = 2 * (energy - ppsi**2 / (2 * i3)) / i1
        beta = 2 * mgl / i1
        a, b = ppsi / i1, pphi / i1
        self.a, self.b, self.i1, self.i3, self.beta, self.ppsi = a, b, i1, i3, beta, ppsi
        self.phi0, self.psi0 = phi0, psi0
        # f(u) = (alpha - beta u)(1 - u^2) - (b - a u)^2, ascending coefficients
        coeffs = [alpha - b**2, 2 * a * b - beta, -(alpha + a**2), beta]
        if beta != 0:
            r = sorted(
                mp.re(x) for x in mp.polyroots(coeffs, extraprec=400, maxsteps=400, asc=True)
            )
            self.u1, self.u2, u3 = (r[0], r[1], r[2]) if beta > 0 else (r[1], r[2], r[0])
            self.w = lambda u: beta * (u3 - u)
        else:
            r = sorted(mp.re(x) for x in mp.polyroots(coeffs[:3], extraprec=400, asc=True))
            self.u1, self.u2 = r
            lead = alpha + a**2
            self.w = lambda u: lead
        # Exactly through a pole (p_phi = +/- p_psi): phi gains pi and psi -pi at each pass.
        self.top_pass = pphi == ppsi
        self.bottom_pass = pphi == -ppsi
        if self.top_pass:
            self.u2 = mp.mpf(1)
        if self.bottom_pass:
            self.u1 = mp.mpf(-1)
        self.gap = self.u2 - self.u1
        half = mp.pi / 2
        self.period = 2 * self._t(0, half)
        self.dphi = 2 * self._g(0, half, self.phidot)
        self.dpsi = 2 * self._g(0, half, self.psidot)
        # The start phase: u0 = u1 + gap sin^2(chi0), chi0 in (pi/2, pi) while u decreases.
        ratio = (u0 - self.u1) / self.gap
        chi0 = mp.asin(mp.sqrt(min(max(ratio, 0), 1)))
        self.chi0 = chi0 if udot0 >= 0 else mp.pi - chi0
        if udot0 == 0 and ratio >= 1:
            self.chi0 = half
        self.t0 = self._t(0, self.chi0)
        self.phi_at0 = self._g(0, self.chi0, self.phidot) + mp.pi * self._passes(self.chi0)
        self.psi_at0 = self._g(0, self.chi0, self.psidot) - mp.pi * self._passes(self.chi0)

    def u(self, chi):
        return self.u1 + self.gap * mp.sin(chi) ** 2

    def phidot(self, u):
        # (b - a u) / (1 - u^2), with the common factor cancelled where a pole is a root
        if self.top_pass:
            return self.a / (1 + u)
        if self.bottom_pass:
            return -self.a / (1 - u)
        return (self.b - self.a * u) / (1 - u**2)

    def psidot(self, u):
        return self.ppsi / self.i3 - u * self.phidot(u)

    def _nodes(self, lo, hi):
        # Interval ends plus every turning point between them (the integrands peak there).
        pts = [lo]
        k = mp.floor(lo / (mp.pi / 2)) + 1
        while k * mp.pi / 2 < hi:
            pts.append(k * mp.pi / 2)
            k += 1
        return pts + [hi]

    def _t(self, lo, hi):
        if hi == lo:
            return mp.mpf(0)
        return mp.quad(lambda x: 2 / mp.sqrt(self.w(self.u(x))), self._nodes(lo, hi))

    def _g(self, lo, hi, rate):
        if hi == lo:
            return mp.mpf(0)
        return mp.quad(
            lambda x: 2 * rate(self.u(x)) / mp.sqrt(self.w(self.u(x))), self._nodes(lo, hi)
        )

    def _passes(self, chi):
        """Passes through a pole in (0, chi], chi in [0, pi]: u = u2 at pi/2, u = u1 at 0, pi."""
        n = 0
        if self.top_pass and chi >= mp.pi / 2:
            n += 1
        if self.bottom_pass and chi >= mp.pi:
            n += 1
        return n

    # ------------------------------------------------------------------ evaluation
    def at(self, t, t_lo=0.0):
        """(theta, phi, psi) as mpf at the time t + t_lo (doubles, summed exactly), phi and psi
        unfolded."""
        with mp.workdps(self.digits):
            s = _mp(t) + _mp(t_lo) + self.t0
            j = mp.floor(s / self.period)
            rem = s - j * self.period
            chi = mp.pi * rem / self.period
            t_chi = self._t(0, chi)
            for _ in range(60):
                step = (t_chi - rem) * mp.sqrt(self.w(self.u(chi))) / 2
                new = chi - step
                t_chi += self._t(chi, new) if new > chi else -self._t(new, chi)
                chi = new
                if abs(step) < mp.mpf(10) ** (-self.digits + 3):
                    break
            u = self.u(chi)
            passes = j * (int(self.top_pass) + int(self.bottom_pass)) + self._passes(chi)
            phi = (
                self.phi0
                + j * self.dphi
                + self._g(0, chi, self.phidot)
                - self.phi_at0
                + mp.pi * passes
            )
            psi = (
                self.psi0
                + j * self.dpsi
                + self._g(0, chi, self.psidot)
                - self.psi_at0
                - mp.pi * passes
            )
            theta = 2 * mp.atan2(mp.sqrt(1 - u), mp.sqrt(1 + u))
            return theta, phi, psi

    def folded(self, t, t_lo=0.0):
        """(theta, phi folded, phi turns, psi folded, psi turns) at t + t_lo: the angles as mpf
        in (-pi, pi], the turns as Python integers."""
        theta, phi, psi = self.at(t, t_lo)
        with mp.workdps(self.digits):
            kp = int(mp.nint(phi / (2 * mp.pi)))
            ks = int(mp.nint(psi / (2 * mp.pi)))
            return theta, phi - 2 * mp.pi * kp, kp, psi - 2 * mp.pi * ks, ks
