"""Cost per step of fixed-step methods beside leapfrog, measured interleaved in one process.

    python benchmarks/timing/per_step.py [--methods NAME ...] [--steps N] [--rounds R]

Every method advances the same heavy top (--body) in the body form by N steps of 1e-3 s, one
method after another within each round; each method's best round counts, and the ratio to the
body-form leapfrog (the cheapest splitting) is printed with the CPU's name. Ratios, not the
nanoseconds, are what carries from one machine or day to another (docs/design-notes.md).
"""

from __future__ import annotations

import argparse
import platform
import time

from topdrift.integrators import get
from topdrift.models import FORM_BODY, RigidBody, body_state

# Demo bodies of our own: a heavy asymmetric top, and a Lagrange top (where the body-form free
# flow of leapfrog is one rotation less).
BODIES = {
    "asymmetric": RigidBody(mass=1.0, inertia=(0.9, 0.75, 0.55), com=(0.02, -0.01, 0.1)),
    "lagrange": RigidBody(mass=1.0, inertia=(0.9, 0.9, 0.55), com=(0.0, 0.0, 0.1)),
}
START = (0.3, 0.9, 0.2, 1.0, 0.5, 6.0)
DEFAULT = (
    "leapfrog",
    "rk4",
    "midpoint",
    "midpoint-kahan",
    "engine-euler",
    "engine-semi-implicit",
    "engine-implicit-gyro",
    "lie-rkmk4",
    "lie-cg3",
    "lie-cf4",
    "rattle",
    "lie-galpha",
)


def cpu_name() -> str:
    try:
        with open("/proc/cpuinfo") as f:
            for line in f:
                if line.startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine()


def one(name: str, body: RigidBody, steps: int) -> float:
    """Seconds for `steps` steps of `name`, the stepper started (and compiled) beforehand."""
    st = get(name).start(FORM_BODY, body.params(), 0.0, body_state(body, *START), {"step": 1e-3})
    st.advance_to(1e-3)  # compile or load the kernel outside the clock
    t0 = time.perf_counter()
    st.advance_to(1e-3 * (steps + 1))
    return time.perf_counter() - t0


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--methods", nargs="+", default=list(DEFAULT))
    ap.add_argument("--steps", type=int, default=200_000)
    ap.add_argument("--rounds", type=int, default=7)
    ap.add_argument("--body", choices=sorted(BODIES), default="asymmetric")
    args = ap.parse_args(argv)
    names = list(dict.fromkeys(["leapfrog", *args.methods]))
    best = dict.fromkeys(names, float("inf"))
    for _ in range(args.rounds):
        for name in names:
            best[name] = min(best[name], one(name, BODIES[args.body], args.steps))
    base = best["leapfrog"]
    print(
        f"CPU: {cpu_name()}; {args.body} body, body form, {args.steps} steps, best of "
        f"{args.rounds} interleaved rounds"
    )
    print(f"{'method':22s} {'ns/step':>9s} {'/ leapfrog':>11s}")
    for name in names:
        ns = best[name] / args.steps * 1e9
        print(f"{name:22s} {ns:9.1f} {best[name] / base:11.2f}")


if __name__ == "__main__":
    main()
