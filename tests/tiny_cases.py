"""Tiny case files for the tests that drive the runner, the store and the command line: a heavy
symmetric top of our own (demo numbers, not a physics result) written out as TOML, and the
variants the tests need. Short horizons and few samples, so that a run takes milliseconds."""

from __future__ import annotations

from pathlib import Path

SYMMETRIC = (0.02, 0.02, 0.01)  # kg m^2 about the pivot: I1 = I2, a Lagrange top
ASYMMETRIC = (0.02, 0.03, 0.015)  # three different moments: no Euler form, no exact solution


def _num_list(v) -> str:
    return "[" + ", ".join(repr(float(x)) for x in v) + "]"


def _value(v) -> str:
    return f'"{v}"' if isinstance(v, str) else repr(v)


def top_toml(
    name: str,
    description: str,
    *,
    horizon: float,
    samples: int,
    theta="30 deg",
    phi=0.0,
    psi=0.0,
    theta_rate=0.0,
    phi_rate=1.0,
    psi_rate="600 rpm",
    inertia=SYMMETRIC,
    com=(0.0, 0.0, 0.05),
) -> str:
    """The TOML text of a 1 kg top with the given start (numbers in SI units or strings with a
    unit, as case files take them)."""
    start = {
        "theta": theta,
        "phi": phi,
        "psi": psi,
        "theta_rate": theta_rate,
        "phi_rate": phi_rate,
        "psi_rate": psi_rate,
    }
    lines = [
        "",
        f'name = "{name}"',
        f'description = "{description}"',
        f"horizon = {horizon!r}",
        f"samples = {samples}",
        "",
        "[body]",
        "mass = 1.0",
        f"inertia = {_num_list(inertia)}",
        f"com = {_num_list(com)}",
        "",
        "[start]",
        *(f"{k} = {_value(v)}" for k, v in start.items()),
        "",
    ]
    return "\n".join(lines)


# The command-line tests' top; {theta} and {spin} are filled in by write_case.
TOP_TOML = top_toml(
    "cli-top",
    "a heavy symmetric top for the command-line tests",
    horizon=0.5,
    samples=11,
    theta="{theta}",
    psi_rate="{spin}",
)
ASYM_TOML = TOP_TOML.replace(_num_list(SYMMETRIC), _num_list(ASYMMETRIC))


def write_case(folder: Path, name: str, text: str, theta="30 deg", spin="600 rpm") -> Path:
    """Write a case file into folder; {theta} and {spin} in text take the given values."""
    p = Path(folder) / name
    p.write_text(text.format(theta=theta, spin=spin))
    return p
