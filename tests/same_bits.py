"""Fingerprint of what topdrift computes, for refactors that must not change a bit.

    python tests/same_bits.py record FILE.json     # with the code before the change
    python tests/same_bits.py check FILE.json      # after it: exit 1 on any difference

It drives the command line only (so it works across layouts): every registered built-in method
in every form it has, on three library cases (a multiscale Lagrange top, a looping Lagrange top
and a chaotic asymmetric body, short horizons), a sweep, an ensemble, a run interrupted by
SIGINT and resumed, and a baseline. Every dataset's bytes are hashed with SHA-256, and so are the
attributes that say what was computed (not when, nor how fast).
"""

from __future__ import annotations

import hashlib
import json
import os
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import h5py

CASES = ["demo-wheel", "looping-nutation", "chaotic-asymmetric"]
LAGRANGE_CASES = CASES[:2]  # the Euler form needs a symmetric top
HORIZON = "1.0"
SAMPLES = "51"
FIXED_STEP = "0.002"
RTOL = "1e-9"
# When and how fast, not what: left out of the fingerprint.
VOLATILE_ATTRS = {"created", "versions", "wall_s", "cpu_s"}
VOLATILE_METRICS = {"wall_s", "cpu_s", "ns_per_step", "ns_per_step_cpu"}
VOLATILE_DATASETS = ("wall_s",)


def topdrift(*args, check=True, **kw):
    proc = subprocess.run(["topdrift", *args], capture_output=True, text=True, **kw)
    if check and proc.returncode not in (0, 1):
        raise SystemExit(f"topdrift {' '.join(args)} exited {proc.returncode}: {proc.stderr}")
    return proc


def fingerprint_h5(path: Path) -> dict:
    out = {}
    with h5py.File(path, "r") as f:

        def visit(name, obj):
            if isinstance(obj, h5py.Dataset):
                if name.endswith(VOLATILE_DATASETS):
                    return
                out[name] = hashlib.sha256(obj[()].tobytes()).hexdigest()
            for key, value in obj.attrs.items():
                if key in VOLATILE_ATTRS:
                    continue
                if key == "metrics":
                    m = json.loads(value)
                    value = json.dumps(
                        {k: v for k, v in m.items() if k not in VOLATILE_METRICS}, sort_keys=True
                    )
                out[f"{name}@{key}"] = hashlib.sha256(str(value).encode()).hexdigest()

        f.visititems(visit)
    return out


def method_table() -> list[dict]:
    return json.loads(topdrift("methods", "--json").stdout)["methods"]


def record(workdir: Path) -> dict:
    prints: dict[str, dict] = {}
    for m in method_table():
        if m["family"] not in {
            "explicit-rk",
            "adaptive-rk",
            "splitting",
            "gauss-legendre",
            "reference",
        }:
            continue
        control = ["--step", FIXED_STEP] if m["control"] == "step" else ["--rtol", RTOL]
        for form in m["forms"]:
            out = workdir / f"{m['name']}-{form}.h5"
            cases = CASES if form == "body" else LAGRANGE_CASES
            run_args = ["--method", m["name"], *control, "--form", form]
            run_args += ["--horizon", HORIZON, "--samples", SAMPLES, "--out", str(out)]
            if topdrift("run", *cases, *run_args, check=False).returncode == 2:
                # a method that refuses the asymmetric body (exit 2, nothing written)
                topdrift("run", *LAGRANGE_CASES, *run_args)
            if out.exists():
                prints[out.name] = fingerprint_h5(out)
            print(f"same_bits: {m['name']} {form}", file=sys.stderr)

    topdrift("sweep", "quick", "--jobs", "2", "--out", str(workdir / "sweep.h5"))
    prints["sweep.h5"] = fingerprint_h5(workdir / "sweep.h5")

    ens = workdir / "ensemble.h5"
    topdrift(
        "run",
        "looping-nutation",
        "--method",
        "leapfrog",
        "--step",
        "0.002",
        "--horizon",
        "1",
        "--samples",
        "11",
        "--ensemble",
        "8",
        "--out",
        str(ens),
    )
    prints["ensemble.h5"] = fingerprint_h5(ens)

    resumed = workdir / "resumed.h5"
    args = [
        "run",
        "looping-nutation",
        "--method",
        "dop853",
        "--rtol",
        "1e-12",
        "--horizon",
        "3000",
        "--samples",
        "3001",
        "--flush-every",
        "0.2",
        "--out",
        str(resumed),
    ]
    proc = subprocess.Popen(["topdrift", *args], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    time.sleep(4.0)
    proc.send_signal(signal.SIGINT)
    proc.wait()
    topdrift(*args, "--resume")
    prints["resumed.h5"] = fingerprint_h5(resumed)

    base = workdir / "baseline.json"
    topdrift("baseline", "--out", str(base))
    data = json.loads(base.read_text())
    det = {}
    for key, r in data["runs"].items():
        det[key] = {k: v for k, v in r.items() if k not in VOLATILE_METRICS | {"ns_per_step_norm"}}
    prints["baseline.json"] = {
        "runs": hashlib.sha256(json.dumps(det, sort_keys=True).encode()).hexdigest()
    }
    return prints


def main(argv: list[str]) -> int:
    if len(argv) != 2 or argv[0] not in {"record", "check"}:
        print(__doc__, file=sys.stderr)
        return 2
    mode, target = argv[0], Path(argv[1])
    with tempfile.TemporaryDirectory() as tmp:
        env_cwd = Path(tmp)
        os.chdir(env_cwd)
        prints = record(env_cwd)
    if mode == "record":
        target.write_text(json.dumps(prints, indent=1, sort_keys=True))
        print(f"same_bits: recorded {sum(map(len, prints.values()))} hashes in {target}")
        return 0
    want = json.loads(target.read_text())

    def volatile(key: str) -> bool:
        # A fingerprint recorded before an attribute was found volatile still holds it.
        return "@" in key and key.rsplit("@", 1)[1] in VOLATILE_ATTRS

    diffs = []
    for fname in sorted(set(want) | set(prints)):
        a, b = want.get(fname, {}), prints.get(fname, {})
        for key in sorted(set(a) | set(b)):
            if not volatile(key) and a.get(key) != b.get(key):
                diffs.append(f"{fname}:{key}")
    for d in diffs:
        print(f"DIFF {d}")
    n = sum(1 for p in want.values() for k in p if not volatile(k))
    print(f"same_bits: {len(diffs)} of {n} hashes differ")
    return 1 if diffs else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
