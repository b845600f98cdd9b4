/* The order-2 splittings of topdrift written in plain C, as a speed reference for the numba
 * kernels. Same algorithm, same operation order as models/flows.py and
 * integrators/splitting_kernels.py: B(h/2) A(h) B(h/2) per step, the closing kick of a step
 * merged with the opening kick of the next (so a step is one kick and one drift), and the same
 * per-step checks (non-finite state; Euler angles leaving (0, pi)) and, in the Euler form, the
 * same folding of phi and psi by whole turns. `first` is the first kick's
 * time: h/2 for a fresh state, h for one whose closing kick is pending.
 * Parameter layout as models/body.py: I1 I2 I3 1/I1 1/I2 1/I3 Mg*chi1 Mg*chi2 Mg*chi3.
 * Returns the number of steps completed (n when nothing went wrong). */
#include <math.h>

enum { P_I1, P_I2, P_I3, P_INV1, P_INV2, P_INV3, P_MGX, P_MGY, P_MGZ };

static inline void kick_euler(double h, double *y, const double *p) {
    double s = sin(y[1]), c = cos(y[1]);
    double a = y[3] - y[5] * c;
    double r = a * p[P_INV1] / (s * s);
    y[0] += h * r;
    y[2] -= h * c * r;
    y[4] += h * (r * (a * c / s - y[5] * s) + p[P_MGZ] * s);
}

static inline void drift_euler(double h, double *y, const double *p) {
    y[1] += h * y[4] * p[P_INV1];
    y[2] += h * y[5] * p[P_INV3];
}

/* models/turns.py: phi and psi folded back into (-fl(pi), fl(pi)] by whole turns fl(2 pi) after
 * every good step, the turns counted; the product k fl(2 pi) split exactly by Dekker's method
 * (models/double_double.py two_prod, no fused multiply-add, as built here without -march). */
static const double TURN = 6.283185307179586, HALF_TURN = 3.141592653589793;
static const double SPLITTER = 134217729.0; /* 2^27 + 1 */

static inline void fold_one(double *y, int i, long *turns, int t) {
    double a = y[i];
    if (a > HALF_TURN || a <= -HALF_TURN) {
        double k = floor(a / TURN + 0.5);
        double ph = k * TURN;
        double c = SPLITTER * k, kh = c - (c - k), kl = k - kh;
        c = SPLITTER * TURN;
        double th = c - (c - TURN), tl = TURN - th;
        double pl = ((kh * th - ph) + kh * tl + kl * th) + kl * tl;
        double r = (a - ph) - pl;
        if (r > HALF_TURN) {
            r -= TURN;
            k += 1.0;
        } else if (r <= -HALF_TURN) {
            r += TURN;
            k -= 1.0;
        }
        y[i] = r;
        turns[t] += (long)k;
    }
}

long leapfrog_euler(double *y, const double *p, double h, double first, long n, long *turns) {
    for (long k = 0; k < n; k++) {
        kick_euler(first, y, p);
        first = h;
        drift_euler(h, y, p);
        double sum = y[0] + y[1] + y[2] + y[3] + y[4] + y[5];
        if (!isfinite(sum) || !(y[1] > 0.0 && y[1] < M_PI)) return k;
        fold_one(y, 0, turns, 0);
        fold_one(y, 2, turns, 1);
    }
    return n;
}

static inline void kick_body(double h, double *y, const double *p) {
    double q0 = y[0], q1 = y[1], q2 = y[2], q3 = y[3];
    double g1 = 2.0 * (q1 * q3 - q0 * q2);
    double g2 = 2.0 * (q2 * q3 + q0 * q1);
    double g3 = q0 * q0 - q1 * q1 - q2 * q2 + q3 * q3;
    double cx = p[P_MGX], cy = p[P_MGY], cz = p[P_MGZ];
    y[4] += h * (g2 * cz - g3 * cy);
    y[5] += h * (g3 * cx - g1 * cz);
    if (cx != 0.0 || cy != 0.0) y[6] += h * (g1 * cy - g2 * cx);
}

static inline void qmul(double a0, double a1, double a2, double a3, double b0, double b1,
                        double b2, double b3, double *o) {
    o[0] = a0 * b0 - a1 * b1 - a2 * b2 - a3 * b3;
    o[1] = a0 * b1 + a1 * b0 + a2 * b3 - a3 * b2;
    o[2] = a0 * b2 - a1 * b3 + a2 * b0 + a3 * b1;
    o[3] = a0 * b3 + a1 * b2 - a2 * b1 + a3 * b0;
}

static inline void free_symmetric(double h, double *y, const double *p) {
    double q0 = y[0], q1 = y[1], q2 = y[2], q3 = y[3];
    double m1 = y[4], m2 = y[5], m3 = y[6];
    double tx = 2.0 * (q2 * m3 - q3 * m2);
    double ty = 2.0 * (q3 * m1 - q1 * m3);
    double tz = 2.0 * (q1 * m2 - q2 * m1);
    double lx = m1 + q0 * tx + (q2 * tz - q3 * ty);
    double ly = m2 + q0 * ty + (q3 * tx - q1 * tz);
    double lz = m3 + q0 * tz + (q1 * ty - q2 * tx);
    double lnorm = sqrt(lx * lx + ly * ly + lz * lz);
    double d[4];
    /* q (qL) as q + q (qL - 1), q (qe3) as q + q (qe3 - 1), each factor from the sine and
     * cosine of a quarter angle (sin = 2 t u, cos - 1 = -2 t^2): the rounding of the nearly
     * constant factors stays at the size of the increment. */
    if (lnorm > 0.0) {
        double quarter = 0.25 * h * lnorm * p[P_INV1];
        double t = sin(quarter);
        double sh = 2.0 * t * cos(quarter) / lnorm;
        qmul(-2.0 * t * t, sh * lx, sh * ly, sh * lz, q0, q1, q2, q3, d);
        q0 = q0 + d[0];
        q1 = q1 + d[1];
        q2 = q2 + d[2];
        q3 = q3 + d[3];
    }
    double qb = 0.25 * h * (p[P_INV3] - p[P_INV1]) * m3;
    double t3 = sin(qb);
    double e0 = -2.0 * t3 * t3;
    double sh3 = 2.0 * t3 * cos(qb);
    double ch = 1.0 + e0;
    qmul(q0, q1, q2, q3, e0, 0.0, 0.0, sh3, d);
    q0 = q0 + d[0];
    q1 = q1 + d[1];
    q2 = q2 + d[2];
    q3 = q3 + d[3];
    /* Newton step to |q| = 1 as q + q g (the factor 1 + g itself would be quantised). */
    double g = 0.5 * (1.0 - (q0 * q0 + q1 * q1 + q2 * q2 + q3 * q3));
    y[0] = q0 + q0 * g;
    y[1] = q1 + q1 * g;
    y[2] = q2 + q2 * g;
    y[3] = q3 + q3 * g;
    double cb1 = -2.0 * sh3 * sh3, sb = 2.0 * sh3 * ch;
    y[4] = m1 + (m1 * cb1 + m2 * sb);
    y[5] = m2 + (m2 * cb1 - m1 * sb);
}

long strang_body(double *y, const double *p, double h, double first, long n) {
    for (long k = 0; k < n; k++) {
        kick_body(first, y, p);
        first = h;
        free_symmetric(h, y, p);
        double sum = y[0] + y[1] + y[2] + y[3] + y[4] + y[5] + y[6];
        if (!isfinite(sum)) return k;
    }
    return n;
}
