"""Bad case files, generated: every one exits 2 with one stderr line naming the key and the
problem, never a traceback, and writes nothing (no results file appears, an existing one keeps
its bytes). Most go through `topdrift.benchmarks.cli.entry.main` in this process; a few through the
installed `topdrift` command. Physically extreme but well-formed cases either run or are refused
on one line, within a time budget."""

from __future__ import annotations

import hashlib
import math
import shutil
import subprocess
import tempfile
import time
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from topdrift.benchmarks.cli import entry as cli

# A valid case, as a nested dict, that every fault below breaks in one place.
VALID = {
    "name": "fuzzed",
    "description": "a heavy symmetric top",
    "horizon": 0.2,
    "samples": 5,
    "body": {"mass": 1.0, "inertia": [0.02, 0.02, 0.01], "com": [0.0, 0.0, 0.05]},
    "start": {
        "theta": "30 deg",
        "phi": 0.0,
        "psi": 0.0,
        "theta_rate": 0.0,
        "phi_rate": 1.0,
        "psi_rate": "600 rpm",
    },
}


def toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, list):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{k} = {toml_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(v)


def toml_text(doc: dict) -> str:
    lines = [f"{k} = {toml_value(v)}" for k, v in doc.items() if not isinstance(v, dict)]
    for k, v in doc.items():
        if isinstance(v, dict):
            lines.append(f"[{k}]")
            lines += [f"{kk} = {toml_value(vv)}" for kk, vv in v.items()]
    return "\n".join(lines) + "\n"


def deep_copy(doc: dict) -> dict:
    return {k: (deep_copy(v) if isinstance(v, dict) else v) for k, v in doc.items()}


# -- faults: each takes the document (and a draw function) and returns the key it broke

BAD_NUMBERS = [-1.0, 0.0, math.nan, math.inf, -math.inf, 1e300, 1e-300, -1e-3]
WRONG_TYPES = ["heavy", True, [1.0, 2.0], {"a": 1}]
NUMBER_KEYS = [("horizon",), ("body", "mass")]


def fault_number(doc, draw):
    key = draw(st.sampled_from(NUMBER_KEYS))
    bad = draw(st.sampled_from(BAD_NUMBERS + WRONG_TYPES))
    if key == ("horizon",) and bad == 1e-300:
        bad = -1e-300
    _set(doc, key, bad)
    return ".".join(key)


def fault_moment(doc, draw):
    i = draw(st.integers(0, 2))
    bad = draw(st.sampled_from([-0.02, 0.0, math.nan, math.inf, 1e-300, 1e300, "big", False]))
    doc["body"]["inertia"][i] = bad
    return f"body.inertia[{i}]"


def fault_triangle(doc, draw):
    # Any principal moment is at most the sum of the other two (a fact of the trade for any
    # mass distribution: I3 = sum m (x^2 + y^2) <= I1 + I2 = sum m (x^2 + y^2 + 2 z^2)).
    # The bound is taken from the moments as they are now, so that a second triangle fault
    # cannot make the first one valid again (0.06, 0.06, 0.01 is a fine body).
    i = draw(st.integers(0, 2))
    now = doc["body"]["inertia"]
    big = (now[(i + 1) % 3] + now[(i + 2) % 3]) * draw(st.floats(1.01, 100.0))
    doc["body"]["inertia"][i] = big
    return f"body.inertia[{i}]"


def fault_inertia_shape(doc, draw):
    doc["body"]["inertia"] = draw(st.sampled_from([[0.02, 0.02], [], [0.02] * 4, 0.02, "0.02"]))
    return "body.inertia"


def fault_com(doc, draw):
    i = draw(st.integers(0, 2))
    doc["body"]["com"][i] = draw(st.sampled_from([math.nan, math.inf, 1e200, "up", True]))
    return f"body.com[{i}]"


def fault_gravity(doc, draw):
    doc["body"]["gravity"] = draw(st.sampled_from([-9.81, math.nan, 1e200, "earth"]))
    return "body.gravity"


def fault_missing(doc, draw):
    key = draw(
        st.sampled_from(
            [("name",), ("description",), ("horizon",), ("samples",), ("start",)]
            + [("start", k) for k in VALID["start"]]
            + [("body", k) for k in ("mass", "inertia", "com")]
        )
    )
    _del(doc, key)
    return ".".join(key)


def fault_missing_body(doc, draw):
    del doc["body"]
    return "body"


def fault_unknown(doc, draw):
    where = draw(st.sampled_from(["", "body", "start", "run"]))
    name = draw(st.sampled_from(["colour", "spin", "massx", "Theta", "steps"]))
    if where == "":
        doc[name] = 1
        return name
    doc.setdefault(where, {})[name] = 1
    return f"{where}.{name}"


def fault_unit(doc, draw):
    key = draw(st.sampled_from(list(VALID["start"])))
    rate = key.endswith("_rate")
    bad = draw(
        st.sampled_from(
            ["3 furlong/s", "2 parsec", "12", "fast", "deg", "1e999 deg", "1 rpm rpm"]
            + (["3 deg", "1 rad"] if rate else ["600 rpm", "2 rad/s"])
        )
    )
    doc["start"][key] = bad
    return f"start.{key}"


def fault_start_value(doc, draw):
    key = draw(st.sampled_from(list(VALID["start"])))
    doc["start"][key] = draw(st.sampled_from([math.nan, math.inf, True, [1.0], {"v": 1}, 1e300]))
    return f"start.{key}"


def fault_theta(doc, draw):
    doc["start"]["theta"] = draw(st.sampled_from([-0.5, 3.5, "200 deg", "-1 deg", "1 rev"]))
    return "start.theta"


def fault_samples(doc, draw):
    doc["samples"] = draw(
        st.sampled_from([0, 1, -5, 10**8, 10**18, 2.0, 5.5, "100", True, math.inf])
    )
    return "samples"


def fault_absurd_horizon(doc, draw):
    doc["horizon"] = draw(st.sampled_from([1e200, 1e308, math.inf, -1e30, 0.0]))
    return "horizon"


def fault_name(doc, draw):
    doc["name"] = draw(st.sampled_from(["", "  ", "has space", "-dash", "a/b", "ünï", 3]))
    return "name"


def fault_table(doc, draw):
    key = draw(st.sampled_from(["body", "start"]))
    doc[key] = draw(st.sampled_from([1.0, "table", [1, 2]]))
    return key


def fault_run(doc, draw):
    run = doc.setdefault("run", {})
    kind = draw(st.sampled_from(["rtol", "step", "form", "method", "atol"]))
    run[kind] = {
        "rtol": draw(st.sampled_from([2.0, 1.0, -1e-6, 0.0, "tight"])),
        "step": draw(st.sampled_from([-0.01, 0.0, math.nan, "small"])),
        "form": draw(st.sampled_from(["sideways", "", 3])),
        "method": draw(st.sampled_from(["", 4, ["rk4"]])),
        "atol": draw(st.sampled_from([-1.0, 0.0, math.inf, 1e-300])),
    }[kind]
    return f"run.{kind}"


def fault_version(doc, draw):
    doc["format_version"] = draw(st.sampled_from([0, 2, 99, "1", 1.0]))
    return "format_version"


KEY_FAULTS = [
    fault_number,
    fault_moment,
    fault_triangle,
    fault_inertia_shape,
    fault_com,
    fault_gravity,
    fault_missing,
    fault_missing_body,
    fault_unknown,
    fault_unit,
    fault_start_value,
    fault_theta,
    fault_samples,
    fault_absurd_horizon,
    fault_name,
    fault_table,
    fault_run,
    fault_version,
]

# Faults of the whole file: no key to name, the message says what is wrong with the file.
FILE_FAULTS = {
    "empty": (lambda text, draw: draw(st.sampled_from([b"", b"   \n\n", b"\t\n"])), "empty file"),
    "broken-toml": (
        lambda text, draw: (
            text.encode()
            + draw(st.sampled_from([b'name = "x\n', b"[body\n", b"= 3\n", b"horizon = 1 2\n"]))
        ),
        "not valid TOML",
    ),
    "not-utf8": (
        lambda text, draw: (
            text.encode()
            + b"# caf"
            + draw(st.sampled_from([b"\xe9", b"\xff\xfe", b"\xc3\x28"]))
            + b"\n"
        ),
        "not UTF-8",
    ),
}


def _set(doc, key, value):
    d = doc
    for k in key[:-1]:
        d = d[k]
    d[key[-1]] = value


def _del(doc, key):
    d = doc
    for k in key[:-1]:
        d = d[k]
    del d[key[-1]]


@st.composite
def bad_files(draw):
    """(bytes, keys it may be refused for, words the message must hold or None)."""
    doc = deep_copy(VALID)
    doc["body"]["inertia"] = list(doc["body"]["inertia"])
    doc["body"]["com"] = list(doc["body"]["com"])
    faults = draw(st.lists(st.sampled_from(KEY_FAULTS), min_size=1, max_size=3))
    keys = set()
    for fault in faults:
        try:
            keys.add(fault(doc, draw))
        except (KeyError, TypeError, IndexError):
            # An earlier fault removed or retyped what this one would break: the earlier one
            # stands, this one is dropped.
            continue
    text = toml_text(doc)
    whole = draw(st.sampled_from([None, None, None, *FILE_FAULTS]))
    if whole is not None:
        make, words = FILE_FAULTS[whole]
        return make(text, draw), set(), words
    return text.encode(), keys, None


# One scratch folder for every example (pytest's tmp_path is per test, not per example).
@pytest.fixture(scope="module")
def scratch():
    d = Path(tempfile.mkdtemp(prefix="topdrift-fuzz-"))
    yield d
    shutil.rmtree(d, ignore_errors=True)


@pytest.fixture(scope="module")
def existing_results(scratch):
    """A results file holding one run, made once; every bad file is run against it too."""
    case = scratch / "good.toml"
    case.write_text(toml_text(VALID))
    out = scratch / "existing.h5"
    args = ["run", str(case), "--method", "leapfrog", "--step", "0.01", "--out", str(out)]
    assert cli.main(args) == 0
    return out


COUNT = {"in_process": 0}


def _check_message(err: str, path: Path, keys: set, words) -> None:
    assert "Traceback" not in err
    assert err.count("\n") == 1, err
    prefix = f"topdrift: error: {path}: "
    assert err.startswith(prefix), err
    rest = err[len(prefix) :].rstrip("\n")
    if words is not None:
        assert rest.startswith(words), err
        return
    named, _, problem = rest.partition(": ")
    assert named in keys, f"named {named!r}, expected one of {sorted(keys)}: {err}"
    assert problem.strip(), err


@settings(
    max_examples=520,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)
@given(case=bad_files(), into_existing=st.booleans())
def test_bad_case_files_exit_2_with_one_line_and_write_nothing(
    case, into_existing, scratch, existing_results, capsys
):
    content, keys, words = case
    path = scratch / "case.toml"
    path.write_bytes(content)
    out = existing_results if into_existing else scratch / "never.h5"
    before = hashlib.sha256(existing_results.read_bytes()).hexdigest()
    capsys.readouterr()
    rc = cli.main(["run", str(path), "--method", "leapfrog", "--step", "0.01", "--out", str(out)])
    captured = capsys.readouterr()
    assert rc == 2, captured.err
    assert captured.out == ""
    _check_message(captured.err, path, keys, words)
    assert not (scratch / "never.h5").exists()
    assert hashlib.sha256(existing_results.read_bytes()).hexdigest() == before
    COUNT["in_process"] += 1


def test_fuzzed_count_is_at_least_500():
    # Runs after the fuzz test (file order): the report counts these.
    assert COUNT["in_process"] >= 500, COUNT


SUBPROCESS_CASES = [
    (b"", set(), "empty file"),
    (b'name = "caf\xe9"\n', set(), "not UTF-8"),
    (toml_text({**VALID, "samples": 10**9}).encode(), {"samples"}, None),
    (
        toml_text({**VALID, "body": {**VALID["body"], "inertia": [0.01, 0.01, 0.05]}}).encode(),
        {"body.inertia[2]"},
        None,
    ),
    (
        toml_text({**VALID, "start": {**VALID["start"], "psi_rate": "3 furlong/s"}}).encode(),
        {"start.psi_rate"},
        None,
    ),
]


def test_installed_command_prints_one_line_and_no_traceback(tmp_path):
    exe = shutil.which("topdrift")
    assert exe, "the topdrift command is not installed (pip install -e .)"
    procs = []
    for i, (content, _keys, _words) in enumerate(SUBPROCESS_CASES):
        path = tmp_path / f"case{i}.toml"
        path.write_bytes(content)
        out = tmp_path / f"r{i}.h5"
        cmd = [exe, "run", str(path), "--method", "rk45", "--rtol", "1e-6", "--out", str(out)]
        procs.append((subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE), path))
    for (proc, path), (_, keys, words) in zip(procs, SUBPROCESS_CASES, strict=True):
        out, err = proc.communicate(timeout=120)
        assert proc.returncode == 2 and out == b""
        _check_message(err.decode(), path, keys, words)
    assert not list(tmp_path.glob("*.h5"))


# -- well-formed but physically extreme: run, or refuse on one line, within a budget

EXTREME = [
    # (label, changes to VALID, run options, "run" or the words of the refusal)
    ("heavy", {"body": {"mass": 1e300}}, ["leapfrog", "--step", "0.01"], "body.mass"),
    (
        "thin",
        {"body": {"inertia": [2e-300, 2e-300, 1e-300]}},
        ["rk45", "--rtol", "1e-6"],
        "body.inertia[0]",
    ),
    ("far", {"horizon": 1e30, "samples": 2}, ["leapfrog", "--step", "0.01"], "steps, more than"),
    ("far-adaptive", {"horizon": 1e30, "samples": 2}, ["dop853", "--rtol", "1e-8"], "turns"),
    # Inside the accepted range, at its edges: a top with a huge gravity torque takes a step far
    # too large for it and ends as diverged (a stored run, exit 1), or is refused up front.
    (
        "edge-heavy",
        {"body": {"mass": 1e100}},
        ["leapfrog", "--form", "body", "--step", "0.01"],
        "run",
    ),
    ("edge-heavy-adaptive", {"body": {"mass": 1e100}}, ["rk45", "--rtol", "1e-6"], "turns"),
    (
        "edge-thin",
        {"body": {"inertia": [2e-100, 2e-100, 1e-100]}},
        ["gauss4", "--step", "0.01"],
        "run",
    ),
    (
        "edge-fast",
        {"start": {"psi_rate": 1e100}},
        ["rk4", "--form", "body", "--step", "0.01"],
        "run",
    ),
    ("tiny-horizon", {"horizon": 1e-100, "samples": 3}, ["dop853", "--rtol", "1e-8"], "run"),
    # The command line keeps to the case files' limits.
    ("cli-samples", {}, ["leapfrog", "--step", "0.01", "--samples", "1000000000"], "--samples"),
    ("cli-atol", {}, ["rk45", "--rtol", "1e-6", "--atol", "1e-300"], "--atol: 1e-300 is outside"),
    ("cli-horizon", {}, ["rk45", "--rtol", "1e-6", "--horizon", "1e-300"], "--horizon: 1e-300"),
    ("cli-step", {}, ["leapfrog", "--step", "1e-300"], "--step: 1e-300 is outside"),
    ("cli-far", {}, ["leapfrog", "--step", "1e-9", "--horizon", "1e4"], "1e+13 steps"),
]


def _extreme_doc(changes: dict) -> dict:
    doc = deep_copy(VALID)
    for k, v in changes.items():
        if isinstance(v, dict):
            doc[k] = {**doc[k], **v}
        else:
            doc[k] = v
    return doc


@pytest.mark.parametrize(
    ("label", "changes", "opts", "expect"), EXTREME, ids=[e[0] for e in EXTREME]
)
def test_extreme_cases_run_or_are_refused_within_a_budget(
    tmp_path, capsys, label, changes, opts, expect
):
    path = tmp_path / "case.toml"
    path.write_text(toml_text(_extreme_doc(changes)))
    out = tmp_path / "r.h5"
    t0 = time.perf_counter()
    rc = cli.main(["run", str(path), "--method", *opts, "--out", str(out), "--json"])
    took = time.perf_counter() - t0
    captured = capsys.readouterr()
    assert took < 20.0, f"{label}: {took:.1f} s"
    assert "Traceback" not in captured.err
    if expect == "run":
        import json

        assert rc in (0, 1), captured.err
        (r,) = json.loads(captured.out)["runs"]
        # A run that stops early says so with a final status and the time; ok means every sample.
        assert r["status"] in ("ok", "diverged", "singular", "failed")
        if r["status"] != "ok":
            assert r["metrics"]["t_fail"] is not None
    else:
        assert rc == 2, captured.err
        lines = [ln for ln in captured.err.splitlines() if ln.startswith("topdrift: error:")]
        assert len(lines) == 1 and expect in lines[0], captured.err
        assert not out.exists()
