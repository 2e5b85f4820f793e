"""A run file any language can read (format_version 2), and version-1 files still read."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import h5py

from sweeper.measure.point import Verdict
from sweeper.store.runfile import RunWriter, read_run

# Only h5py and the file's own attributes: no sweeper import, no knowledge of its field list.
READER = r'''
import sys
import h5py

with h5py.File(sys.argv[1], "r") as f:
    points = f["points"]
    gain = points["gain_db"]
    scale = f[gain.attrs["DIMENSION_LIST"][0][0]]  # the dimension scale HDF5 itself records
    assert scale.name == "/points/frequency_hz", scale.name
    assert gain.dims[0].label == "frequency_hz"
    found = {}
    for name, ds in points.items():
        assert ds.attrs["description"], name  # every dataset says what it holds
        found[name] = ds
    assert "dB" == found["gain_db"].attrs["units"] and "degree" == found["phase_deg"].attrs["units"]
    standard = [n for n, ds in found.items() if ds.attrs.get("uncertainty") == "standard"]
    assert {"u_gain_db", "u_phase_deg"} <= set(standard), standard
    assert all(float(found[n].attrs["coverage_factor"]) == 1.0 for n in standard)
    names = [n.decode() if isinstance(n, bytes) else n for n in f["codes/verdict/name"][()]]
    values = list(f["codes/verdict/value"][()])
    verdict_of = dict(zip(values, names))
    print(verdict_of[int(points["verdict"][0])], len(scale), f["metadata/dut"].attrs["serial"],
          int("sweeper" in sys.modules))
'''


def test_a_reader_with_h5py_alone_finds_frequency_gain_phase_u_and_verdict_names(tmp_path, header, points):
    path = tmp_path / "run.h5"
    with RunWriter.from_header(path, header) as writer:
        writer.extend(points[:5])
        writer.finish({"verdict": Verdict.FAIL})
    script = tmp_path / "reader.py"
    script.write_text(READER)
    done = subprocess.run([sys.executable, "-I", str(script), str(path)], capture_output=True, text=True,
                          timeout=60, cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    verdict, count, serial, imported = done.stdout.split()
    assert verdict == Verdict(points[0].verdict).name and int(count) == 5
    assert serial == header["metadata"]["dut"]["serial"] and imported == "0"


def _as_version1(path: Path) -> None:
    """Turn a file into the version-1 layout: no /codes, no /metadata, no descriptions or
    dimension scales, format_version 1 (what the previous code wrote, DEVELOPERS.md)."""
    with h5py.File(path, "r+") as f:
        for name in ("codes", "metadata"):
            del f[name]
        for group in ("points", "prediction"):
            for ds in f[group].values():
                for attr in ("description", "uncertainty", "coverage_factor"):
                    if attr in ds.attrs:
                        del ds.attrs[attr]
                for attr in [a for a in ds.attrs if a.startswith("code_")]:
                    del ds.attrs[attr]
        f.attrs["format_version"] = 1


def test_a_version1_file_still_reads(tmp_path, header, points):
    new, old = tmp_path / "new.h5", tmp_path / "old.h5"
    for path in (new, old):
        with RunWriter.from_header(path, header) as writer:
            writer.extend(points[:7])
            writer.finish({"verdict": Verdict.PASS}, end_utc="2026-01-01T00:00:00.000Z")
    _as_version1(old)
    frame_old, meta_old = read_run(old)
    frame_new, meta_new = read_run(new)
    assert meta_old["format_version"] == 1 and meta_new["format_version"] == 2
    assert frame_old.equals(frame_new)
    assert meta_old["dut"] == meta_new["dut"] and meta_old["verdict_name"] == "PASS"
