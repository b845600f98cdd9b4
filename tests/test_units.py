"""Every dataset of a version-2 run file carries a `units` attribute, read with plain h5py."""

from __future__ import annotations

import h5py

# SI units of the quantities (common practice): angles in rad, times in s, angular momentum in
# kg m^2/s, energy in J; unit quaternions, directions and counts of turns have none ("1").
EXPECTED = {
    "t": "s",
    "euler": "rad",
    "euler_turns": "1",
    "quaternion": "1",
    "momentum": "kg m^2/s",
    "invariants/energy": "J",
    "invariants/p_phi": "kg m^2/s",
    "invariants/p_psi": "kg m^2/s",
    "invariants/norm": "1",
    "exact/euler": "rad",
    "exact/euler_turns": "1",
    "exact/axis": "1",
    "ensemble/axis_spread": "rad",
}


def _every_dataset(path):
    found = {}
    with h5py.File(path, "r") as f:
        assert f.attrs["format_version"] == 2

        def visit(name, obj):
            if isinstance(obj, h5py.Dataset):
                found[name] = obj.attrs.get("units")

        f.visititems(visit)
    return found


def test_every_dataset_has_units(command_line, tmp_path):
    out = tmp_path / "r.h5"
    common = ["--horizon", "0.2", "--samples", "11", "--out", str(out)]
    for args in (
        ["--method", "leapfrog", "--step", "0.001", "--form", "euler"],
        ["--method", "gauss4", "--step", "0.001", "--form", "body"],
        ["--method", "leapfrog", "--step", "0.001", "--form", "euler", "--ensemble", "3"],
    ):
        rc, _, err = command_line("run", "looping-nutation", *args, *common)
        assert rc == 0, err
    found = _every_dataset(out)
    assert len(found) > 30  # three runs, their checkpoints and an ensemble's datasets
    missing = sorted(name for name, units in found.items() if units is None)
    assert not missing, missing
    for name, units in found.items():
        tail = name.split("/", 2)[2]  # runs/<id>/<dataset>
        if tail in EXPECTED:
            assert units == EXPECTED[tail], name
        elif tail == "state":
            assert units.split(", ")[-1] == "kg m^2/s" and units.count(",") in (5, 6), name
