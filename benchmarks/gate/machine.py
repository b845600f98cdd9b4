"""The machine a timing was taken on, fine enough to tell two machines apart.

A CPU string such as "AMD EPYC" names a product line that spans several microarchitectures: two
cloud machines with the same string ran the same kernels a third apart. Timings are compared only
between machines whose fingerprint is the same in every field: the CPU's model name, vendor,
family, model and stepping (as the kernel reports them), the instruction-set extensions that
change the code numba generates or how fast it runs, the number of logical cores, and the
compiler (numba, llvmlite, the LLVM version and the CPU name LLVM compiles for).
"""

from __future__ import annotations

import functools
import os
import platform

from topdrift.benchmarks.gate.baseline_file import MACHINE_KEYS

# Extensions LLVM uses for the kernels' floating-point code when the host has them; a machine
# with or without one of these runs different instructions.
FLAGS = (
    "sse4_2",
    "avx",
    "avx2",
    "fma",
    "bmi2",
    "avx512f",
    "avx512dq",
    "avx512vl",
    "avx512bw",
    "avx512_fp16",
    "amx_tile",
)
FIELDS = MACHINE_KEYS  # the baseline format owns the key names


def fingerprint() -> dict:
    """The fingerprint of this machine and compiler (a fresh dict each call)."""
    return dict(_fingerprint())


@functools.cache
def _fingerprint() -> dict:
    info = _cpuinfo()
    flags = set(info.get("flags", "").split())
    out = {
        "cpu": info.get("model name") or platform.processor() or platform.machine() or None,
        "vendor": info.get("vendor_id"),
        "family": info.get("cpu family"),
        "model": info.get("model"),
        "stepping": info.get("stepping"),
        "flags": " ".join(f for f in FLAGS if f in flags),
        "cores": os.cpu_count(),
    }
    out.update(_compiler())
    return out


def _cpuinfo() -> dict:
    """The first processor's block of /proc/cpuinfo (Linux), or nothing elsewhere."""
    fields: dict[str, str] = {}
    try:
        with open("/proc/cpuinfo", encoding="utf-8", errors="replace") as fh:
            for line in fh:
                if not line.strip():
                    if fields:
                        break
                    continue
                key, _, value = line.partition(":")
                fields.setdefault(key.strip(), value.strip())
    except OSError:
        pass
    return fields


def _compiler() -> dict:
    from importlib.metadata import PackageNotFoundError, version

    out: dict = {}
    for pkg in ("numba", "llvmlite"):
        try:
            out[pkg] = version(pkg)
        except PackageNotFoundError:
            out[pkg] = None
    try:
        import llvmlite.binding as llvm

        out["llvm"] = ".".join(str(v) for v in llvm.llvm_version_info)
        out["llvm_cpu"] = llvm.get_host_cpu_name()
    except Exception:  # noqa: BLE001 - a fingerprint without these still tells machines apart
        out["llvm"], out["llvm_cpu"] = None, None
    return out


def differences(a: dict, b: dict) -> list[str]:
    """The fields in which two fingerprints differ, in words ("family 25 -> 26")."""
    out = []
    for k in FIELDS:
        x, y = a.get(k), b.get(k)
        if x == y:
            continue
        if k == "flags":
            xs, ys = set((x or "").split()), set((y or "").split())
            moved = [f"+{f}" for f in sorted(ys - xs)] + [f"-{f}" for f in sorted(xs - ys)]
            out.append(f"flags {' '.join(moved)}")
        else:
            out.append(f"{k} {x} -> {y}")
    return out
