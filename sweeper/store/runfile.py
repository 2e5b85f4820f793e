"""The run file: one HDF5 file per run holding the points, the plan, the prediction and who/what/when.

The run file is written as the sweep goes (flushed after every point) but it is not trusted to
survive a crash: the journal (`sweeper.store.journal`) is the record of truth, and
`ensure_runfile` / `rebuild_runfile` rebuild the run file from it when the file is missing,
unreadable or stale. Build the journal header with `run_header` and give the same header to
`RunWriter.from_header`, so a rebuilt file holds the same data as the one written directly.

Run-file layout, format "sweeper-run", format_version 2
=======================================================

Times are ISO 8601 UTC strings (written as YYYY-MM-DDThh:mm:ss.sssZ). Strings are variable-length UTF-8. Attributes marked (JSON)
hold JSON text; their names are listed in the `json_attributes` attribute of the same object.

``/`` (root attributes)
    format            "sweeper-run"
    format_version    1
    run_id            unique id of the run (also the file's base name)
    campaign_id       id of the campaign the run belongs to ("" when none)
    plan_name         name of the test plan
    plan_sha256       SHA-256 (hex) of the plan YAML text as UTF-8 bytes (the /plan/yaml dataset)
    station, operator, project   free text from the plan's metadata
    tags              (JSON) list of strings
    dut               (JSON) {"board", "serial", "description"}
    instruments       (JSON) list of {"role", "resource", "idn", "driver", "driver_sha256"}
    software          (JSON) {package: version} for sweeper, python, numpy, scipy, h5py, hdf5,
                      pyvisa, pyvisa-sim, pandas, pydantic ("not installed" when absent)
    host              host name of the computer that ran the sweep
    start_utc         when the run started
    end_utc           when the run finished; "" while running or when it never finished
    finished          bool: `finish` was called (False for a crashed or interrupted run)
    verdict           run verdict as an int (sweeper.measure.point.Verdict), 0 until finished
    verdict_name      the Verdict member name, e.g. "PASS"
    json_attributes   list of the names above stored as JSON
    any further metadata key given by the caller: scalars (str, int, float, bool) as they are,
    lists, dicts and None as (JSON)

``/plan/yaml``
    scalar string dataset: the plan file's text, verbatim

``/points`` (group; attribute ``count`` = number of complete points)
    one chunked, resizable 1-D dataset per `Point` field, all of length `count`, in the
    order the points were measured: int fields as int64, float fields as float64, `time_utc`
    as a UTF-8 string. Every dataset has a ``units`` attribute equal to
    ``sweeper.measure.point.units_of(name)`` ("Hz", "dB", "degree", "V", "s", "ISO 8601 UTC",
    "" when dimensionless). ``flags`` also carries ``flag_bits`` (JSON {name: bit value} of
    `Flag`) and ``verdict`` carries ``verdict_names`` (JSON {name: value} of `Verdict`).

``/prediction`` (group)
    ``frequency_hz``: the planned frequencies, Hz; one float64 dataset per predicted quantity
    over those frequencies (e.g. model_gain_db, model_phase_deg, gain_lo_db, gain_hi_db,
    phase_lo_deg, phase_hi_deg), each with a ``units`` attribute from `units_of`.

``/waveforms/<index>`` (optional group per point index, present only when captures were kept)
    ``volts``: float64 (2, N), gzip-compressed, units "V"; row 0 = channel 1 (DUT input),
    row 1 = channel 2 (DUT output). Group attribute ``sample_interval_s`` (s).
    Waveforms are not in the journal: a rebuilt file keeps them only when the old run file
    was still readable.

``/summary`` (group, written by `finish`)
    the run summary given to `finish`: scalar values as attributes, lists/dicts/None as (JSON)
    attributes listed in ``json_attributes``.

``/points`` datasets (format_version 2) also carry ``description`` (what the column holds,
`sweeper.store.runfile.describe`, generic for new columns), a dimension scale: ``frequency_hz``
is an HDF5 dimension scale and every other point (and prediction) dataset has it attached to
dimension 0 (label "frequency_hz"); ``u_*`` datasets carry ``uncertainty`` = "standard" and
``coverage_factor`` = 1.0, ``U_*`` datasets ``uncertainty`` = "expanded" and
``coverage_factor_dataset`` = "k"; ``verdict`` and ``flags`` carry one int attribute
``code_<NAME>`` per member.

``/codes/verdict``, ``/codes/flags`` (format_version 2)
    ``name`` (strings) and ``value`` (int64), row by row: the names beside their codes.

``/metadata`` (format_version 2): the metadata other languages need, as plain values
    ``dut`` group (attributes board, serial, description); ``tags`` string dataset;
    ``software`` group (one string attribute per package); ``instruments/<i>`` groups (one string
    attribute per identity field: role, resource, idn, driver, driver_sha256); after a resumed
    run, ``interruptions/<i>`` groups (interrupted_utc, resumed_utc, gap_s, reason, ...).

Seal (root attributes, see DEVELOPERS.md "The seal")
    ``seal_journal_sha256``  the journal's hash chain after its last record when sealed
    ``seal_content_sha256``  SHA-256 of everything else in the file (`content_digest`)
    absent while the file is being written (or for a killed run until it is rebuilt).

Version-1 files (no /codes, /metadata, descriptions, scales or seal) still read.
"""

from __future__ import annotations

import hashlib
import importlib.metadata
import json
import os
import platform
import socket
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

import h5py
import numpy as np
import pandas as pd

from sweeper.measure.point import POINT_FIELDS, Flag, Point, Verdict, units_of
from sweeper.store.fields import FIELD_DEFAULTS, FIELD_KINDS, point_values
from sweeper.store.journal import _fsync_dir, dumps, loads, read_journal, utc_now_iso

FORMAT_NAME = "sweeper-run"
FORMAT_VERSION = 2
READABLE_FORMAT_VERSIONS = (1, 2)
_DESCRIPTIONS = {
    "index": "position of the point in the planned sweep, from 0",
    "frequency_hz": "stimulus frequency of the point (the dimension scale of every /points dataset)",
    "gain_db": "measured gain 20 log10(A_out / A_in)",
    "phase_deg": "measured phase of the output relative to the input, wrapped to (-180, 180]",
    "amplitude_in_v": "fitted peak amplitude, channel 1 (DUT input)",
    "amplitude_out_v": "fitted peak amplitude, channel 2 (DUT output)",
    "range_in_v": "vertical full-scale span the measuring instrument used, channel 1 (DUT input)",
    "range_out_v": "vertical full-scale span the measuring instrument used, channel 2 (DUT output)",
    "samples": "samples per capture",
    "captures": "acquisitions averaged into the point",
    "flags": "bit mask of point flags; names and bits in /codes/flags",
    "elapsed_s": "time since the run started, on the bench clock",
    "time_utc": "when the point was finished, UTC ISO 8601 with milliseconds",
    "verdict": "point verdict code; names and codes in /codes/verdict",
    "margin_gain_db": "distance to the nearest gain limit: positive inside the limits, negative outside",
    "margin_phase_deg": "distance to the nearest phase limit: positive inside the limits, negative outside",
}


def describe(name: str) -> str:
    """A description of a point or prediction column from its name (generic for new columns)."""
    if name in _DESCRIPTIONS:
        return _DESCRIPTIONS[name]
    if name.startswith("u_"):
        return f"standard uncertainty (k = 1) of {name[2:]}"
    if name.startswith("U_"):
        return f"expanded uncertainty of {name[2:]}, U = k u (coverage factor in the dataset k)"
    if name.endswith("_lo_db") or name.endswith("_lo_deg"):
        return f"lower limit ({name})"
    if name.endswith("_hi_db") or name.endswith("_hi_deg"):
        return f"upper limit ({name})"
    if name.startswith("model_"):
        return f"the model's prediction of {name[6:]}"
    unit = units_of(name)
    return f"{name.replace('_', ' ')}" + (f" ({unit})" if unit else "")
FINISH_EVENT = "finished"
SALVAGE_EVENT = "salvaged"  # journal event of `sweeper resume --salvage`: damaged records moved aside
RESUMED_EVENT = "resumed"  # journal event of `sweeper resume`: voids the finish event before it
"""Journal event kind that marks a finished run; its data carry `summary` (dict)."""

SOFTWARE_PACKAGES: tuple[str, ...] = (
    "sweeper", "python", "numpy", "scipy", "h5py", "hdf5", "pyvisa", "pyvisa-sim", "pandas", "pydantic",
)
_RESERVED_KEYS = frozenset(
    {"format", "format_version", "json_attributes", "end_utc", "finished", "verdict", "verdict_name",
     "prediction", "summary", "waveform_indexes"}
)
_CHUNK_POINTS = 64
_STR_DTYPE = h5py.string_dtype("utf-8")
_NP_DTYPES = {int: np.dtype(np.int64), float: np.dtype(np.float64), str: _STR_DTYPE}


SEAL_ATTRIBUTES = ("seal_journal_sha256", "seal_content_sha256")
"""Root attributes of the seal; `content_digest` leaves them (and nothing else) out."""
_UNHASHED_ATTRIBUTES = frozenset({*SEAL_ATTRIBUTES, "DIMENSION_LIST", "REFERENCE_LIST"})


class RunFileError(ValueError):
    """A run file (or the metadata for one) that cannot be written or read as asked."""


def software_versions() -> dict[str, str]:
    """Versions of Python and the packages a run depends on ("not installed" when absent)."""
    versions: dict[str, str] = {}
    for name in SOFTWARE_PACKAGES:
        if name == "python":
            versions[name] = platform.python_version()
        elif name == "hdf5":
            versions[name] = h5py.version.hdf5_version
        else:
            try:
                versions[name] = importlib.metadata.version(name)
            except importlib.metadata.PackageNotFoundError:
                versions[name] = "not installed"
    return versions


def complete_metadata(metadata: Mapping[str, Any]) -> dict[str, Any]:
    """A plain-JSON copy of run metadata with defaults filled in.

    Requires `run_id` (non-empty str) and `plan_yaml` (str). Fills `plan_sha256` (checked when
    given), `software` (caller's entries kept, missing ones from importlib.metadata), `host`,
    `start_utc` (now), and empty `plan_name`, `campaign_id`, `station`, `operator`, `project`,
    `tags`, `dut`, `instruments`. Identity dataclasses in `instruments` become dicts.
    """
    md = loads(dumps(dict(metadata)))
    bad = sorted(_RESERVED_KEYS & set(md))
    if bad:
        raise RunFileError(f"metadata keys reserved for the run file: {', '.join(bad)}")
    if not isinstance(md.get("run_id"), str) or not md["run_id"]:
        raise RunFileError("metadata.run_id: a non-empty string is required")
    if not isinstance(md.get("plan_yaml"), str):
        raise RunFileError("metadata.plan_yaml: the plan's text is required")
    digest = hashlib.sha256(md["plan_yaml"].encode("utf-8")).hexdigest()
    if md.setdefault("plan_sha256", digest) != digest:
        raise RunFileError("metadata.plan_sha256 does not match plan_yaml")
    software = software_versions()
    software.update(md.get("software") or {})
    md["software"] = software
    md.setdefault("host", socket.gethostname())
    md.setdefault("start_utc", utc_now_iso())
    for key in ("plan_name", "campaign_id", "station", "operator", "project"):
        md.setdefault(key, "")
    md.setdefault("tags", [])
    md.setdefault("dut", {})
    md.setdefault("instruments", [])
    return md


def _check_arrays(
    planned_frequency_hz: Any, prediction: Mapping[str, Any]
) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    freq = np.asarray(planned_frequency_hz, dtype=np.float64)
    if freq.ndim != 1:
        raise RunFileError("planned_frequency_hz must be 1-D")
    arrays: dict[str, np.ndarray] = {}
    for name, values in prediction.items():
        if not isinstance(name, str) or not name or "/" in name or name == "." or name == "frequency_hz":
            raise RunFileError(f"bad prediction name {name!r}")
        arr = np.asarray(values, dtype=np.float64)
        if arr.shape != freq.shape:
            raise RunFileError(f"prediction {name!r} has shape {arr.shape}, planned frequencies {freq.shape}")
        arrays[name] = arr
    return freq, arrays


def run_header(
    metadata: Mapping[str, Any], planned_frequency_hz: np.ndarray, prediction: Mapping[str, np.ndarray]
) -> dict[str, Any]:
    """The journal header for a run: completed metadata, planned frequencies (Hz) and prediction
    arrays as lists. Pass it to `Journal.create` and to `RunWriter.from_header`."""
    freq, arrays = _check_arrays(planned_frequency_hz, prediction)
    return {
        "metadata": complete_metadata(metadata),
        "planned_frequency_hz": freq.tolist(),
        "prediction": {name: arr.tolist() for name, arr in arrays.items()},
    }


def _set_attrs(attrs: h5py.AttributeManager, values: Mapping[str, Any]) -> None:
    """Scalars as attributes, anything else as JSON text listed in `json_attributes`."""
    json_names = list(attrs.get("json_attributes", []))
    for key, value in values.items():
        if isinstance(value, (str, bool, int, float)):
            attrs[key] = value
            if key in json_names:
                json_names.remove(key)
        else:
            attrs[key] = dumps(value)
            if key not in json_names:
                json_names.append(key)
    attrs["json_attributes"] = np.array(json_names, dtype=_STR_DTYPE)


def _get_attrs(attrs: h5py.AttributeManager) -> dict[str, Any]:
    json_names = {str(n) for n in attrs.get("json_attributes", [])}
    out: dict[str, Any] = {}
    for key, value in attrs.items():
        if key == "json_attributes":
            continue
        if isinstance(value, bytes):
            value = value.decode("utf-8")
        elif isinstance(value, np.generic):
            value = value.item()
        out[key] = loads(value) if key in json_names else value
    return out


class RunWriter:
    """Writes one run file as the sweep goes. Use as a context manager, or call `close`.

    `metadata` is completed by `complete_metadata`; `prediction` maps names (units by suffix)
    to arrays over `planned_frequency_hz` (Hz). The file must not exist yet.
    """

    def __init__(
        self,
        path: str | os.PathLike[str],
        metadata: Mapping[str, Any],
        planned_frequency_hz: np.ndarray,
        prediction: Mapping[str, np.ndarray],
    ) -> None:
        self._path = Path(path)
        md = complete_metadata(metadata)
        freq, arrays = _check_arrays(planned_frequency_hz, prediction)
        plan_yaml = md.pop("plan_yaml")
        try:
            self._file = h5py.File(self._path, "w-")
        except (FileExistsError, OSError) as exc:
            raise RunFileError(f"{self._path}: cannot create run file: {exc}") from None
        try:
            self._write_layout(md, plan_yaml, freq, arrays)
            self._file.flush()
        except BaseException:
            self._file.close()
            self._path.unlink(missing_ok=True)  # ours: created above
            raise
        self._count = 0
        self._finished = False

    @classmethod
    def from_header(cls, path: str | os.PathLike[str], header: Mapping[str, Any]) -> RunWriter:
        """A writer from a journal header made by `run_header`."""
        missing = [k for k in ("metadata", "planned_frequency_hz", "prediction") if k not in header]
        if missing:
            raise RunFileError(f"journal header lacks {', '.join(missing)}")
        if not isinstance(header["metadata"], dict) or not isinstance(header["prediction"], dict):
            raise RunFileError("journal header: metadata and prediction must be objects")
        return cls(path, header["metadata"], np.asarray(header["planned_frequency_hz"], dtype=np.float64),
                   {k: np.asarray(v, dtype=np.float64) for k, v in header["prediction"].items()})

    @classmethod
    def resume(cls, path: str | os.PathLike[str]) -> RunWriter:
        """Reopen an unfinished run file (e.g. just rebuilt by `ensure_runfile`) to append more points."""
        self = cls.__new__(cls)
        self._path = Path(path)
        try:
            self._file = h5py.File(self._path, "r+")
        except OSError as exc:
            raise RunFileError(f"{self._path}: cannot open run file: {exc}") from None
        try:
            _check_format(self._file, self._path)
            if bool(self._file.attrs["finished"]):
                raise RunFileError(f"{self._path}: run already finished")
            self._count = int(self._file["points"].attrs["count"])
            for name in SEAL_ATTRIBUTES:  # written to again: sealed anew when closed by finish_run
                if name in self._file.attrs:
                    del self._file.attrs[name]
            self._file.flush()
        except BaseException:
            self._file.close()
            raise
        self._finished = False
        return self

    def _write_layout(
        self, md: dict[str, Any], plan_yaml: str, freq: np.ndarray, arrays: dict[str, np.ndarray]
    ) -> None:
        f = self._file
        f.attrs["format"] = FORMAT_NAME
        f.attrs["format_version"] = FORMAT_VERSION
        _set_attrs(f.attrs, md)
        _set_attrs(f.attrs, {"end_utc": "", "finished": False, "verdict": int(Verdict.NOT_JUDGED),
                             "verdict_name": Verdict.NOT_JUDGED.name})
        f.create_group("plan").create_dataset("yaml", data=plan_yaml, dtype=_STR_DTYPE)
        points = f.create_group("points")
        points.attrs["count"] = 0
        for name in POINT_FIELDS:
            ds = points.create_dataset(
                name, shape=(0,), maxshape=(None,), chunks=(_CHUNK_POINTS,), dtype=_NP_DTYPES[FIELD_KINDS[name]]
            )
            ds.attrs["units"] = units_of(name)
        points["flags"].attrs["flag_bits"] = json.dumps({m.name: int(m.value) for m in Flag})
        points["verdict"].attrs["verdict_names"] = json.dumps({m.name: int(m.value) for m in Verdict})
        _describe_columns(points, POINT_FIELDS)
        codes = f.create_group("codes")
        for group_name, enum_type, what in (("verdict", Verdict, "point and run verdicts"),
                                            ("flags", Flag, "point flag bits")):
            members = [m for m in enum_type if m.name]
            g = codes.create_group(group_name)
            g.create_dataset("name", data=np.array([m.name for m in members], dtype=object), dtype=_STR_DTYPE)
            g.create_dataset("value", data=np.array([int(m.value) for m in members], dtype=np.int64))
            g["name"].attrs["description"] = f"names of the {what}, row by row beside /codes/{group_name}/value"
            g["value"].attrs["description"] = f"codes of the {what} as stored in /points/{group_name}"
            for m in members:
                points[group_name].attrs[f"code_{m.name}"] = int(m.value)
        _plain_metadata(f.create_group("metadata"), md)
        pred = f.create_group("prediction")
        for name, arr in {"frequency_hz": freq, **arrays}.items():
            pred.create_dataset(name, data=arr, dtype=np.float64).attrs["units"] = units_of(name)
        _describe_columns(pred, ["frequency_hz", *arrays])

    @property
    def path(self) -> Path:
        return self._path

    @property
    def count(self) -> int:
        """Points written so far."""
        return self._count

    def _require_open(self) -> h5py.File:
        if not self._file:
            raise RunFileError(f"{self._path}: run file is closed")
        if self._finished:
            raise RunFileError(f"{self._path}: run already finished")
        return self._file

    def extend(self, points: Iterable[Point]) -> None:
        """Append several points at once, then flush."""
        rows = [point_values(p) for p in points]
        if not rows:
            return
        group = self._require_open()["points"]
        start, stop = self._count, self._count + len(rows)
        for name in POINT_FIELDS:
            ds = group[name]
            ds.resize((stop,))
            ds[start:stop] = _column(name, [row[name] for row in rows])
        group.attrs["count"] = stop  # written last: a crash mid-append leaves `count` at the old value
        self._count = stop
        self._file.flush()

    def append(self, point: Point) -> None:
        """Append one point to every /points dataset, then flush."""
        self.extend([point])

    def add_waveforms(self, index: int, volts: np.ndarray, sample_interval_s: float) -> None:
        """Keep the capture of point `index`: volts (2, N), V; sample interval, s. Replaces an older one."""
        data = np.asarray(volts, dtype=np.float64)
        if data.ndim != 2 or data.shape[0] != 2 or data.shape[1] == 0:
            raise RunFileError(f"volts must have shape (2, N) with N >= 1, got {data.shape}")
        waves = self._require_open().require_group("waveforms")
        name = str(int(index))
        if name in waves:
            del waves[name]
        group = waves.create_group(name)
        group.attrs["sample_interval_s"] = float(sample_interval_s)
        ds = group.create_dataset("volts", data=data, compression="gzip", compression_opts=4, shuffle=True,
                                  chunks=(2, min(data.shape[1], 65536)))
        ds.attrs["units"] = "V"
        ds.attrs["rows"] = "channel 1 (DUT input), channel 2 (DUT output)"
        self._file.flush()

    def finish(self, summary: Mapping[str, Any], end_utc: str | None = None) -> None:
        """Mark the run finished: end time (ISO 8601 UTC, default now), run verdict from
        summary["verdict"] (int or Verdict; NOT_JUDGED when absent) and the summary attributes."""
        f = self._require_open()
        plain = loads(dumps(dict(summary)))
        given = plain.get("verdict", int(Verdict.NOT_JUDGED))
        try:
            verdict = Verdict[given] if isinstance(given, str) else Verdict(given)
        except (KeyError, ValueError):
            raise RunFileError(f"summary.verdict: {given!r} is not a Verdict") from None
        _set_attrs(f.require_group("summary").attrs, plain)
        _plain_interruptions(f, plain)
        _set_attrs(f.attrs, {"end_utc": end_utc or utc_now_iso(), "finished": True, "verdict": int(verdict),
                             "verdict_name": verdict.name})
        f.flush()
        self._finished = True

    def seal(self, journal_chain: str) -> None:
        """Write the seal: the journal's running hash after its last record (hex) and the
        digest of this file's content and metadata (`content_digest`), then flush."""
        if not self._file:
            raise RunFileError(f"{self._path}: run file is closed")
        self._file.attrs["seal_journal_sha256"] = str(journal_chain)
        self._file.attrs["seal_content_sha256"] = content_digest(self._file)
        self._file.flush()

    def close(self) -> None:
        """Close the file (idempotent). Without `finish` the run stays marked unfinished."""
        if self._file:
            self._file.close()

    def __enter__(self) -> RunWriter:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def _canonical(value: Any) -> Any:
    """A JSON-able, exact stand-in of an HDF5 value (attribute or dataset content) for hashing."""
    if isinstance(value, bytes):
        return value.decode("utf-8", "surrogateescape")
    if isinstance(value, np.ndarray):
        if value.dtype.kind in "OSU":
            return ["strings", list(value.shape), [_canonical(v) for v in value.reshape(-1).tolist()]]
        return [value.dtype.str, list(value.shape), np.ascontiguousarray(value).tobytes().hex()]
    if isinstance(value, np.generic):
        return _canonical(np.asarray(value))
    if isinstance(value, float):
        return ["float", struct_bits(value)]
    if isinstance(value, (str, int, bool)) or value is None:
        return value
    return repr(value)


def struct_bits(value: float) -> str:
    """The 16 hex digits of a float64's bits (NaN payloads kept)."""
    return np.float64(value).tobytes().hex()


def _attrs_canonical(attrs: h5py.AttributeManager, skip: frozenset[str]) -> list[Any]:
    return [[key, _canonical(attrs[key])] for key in sorted(attrs) if key not in skip]


def content_digest(f: h5py.File) -> str:
    """SHA-256 (hex) of a run file's content and metadata: every attribute (the seal's own and
    HDF5's dimension-scale bookkeeping left out) and every dataset's values, in name order."""
    entries: list[Any] = [["/", _attrs_canonical(f.attrs, _UNHASHED_ATTRIBUTES)]]

    def visit(name: str, obj: Any) -> None:
        attrs = _attrs_canonical(obj.attrs, _UNHASHED_ATTRIBUTES)
        if isinstance(obj, h5py.Dataset):
            data = obj.asstr()[()] if h5py.check_string_dtype(obj.dtype) else obj[()]
            entries.append([name, attrs, _canonical(np.asarray(data, dtype=object if isinstance(data, str) else None))])
        else:
            entries.append([name, attrs])

    f.visititems(visit)
    text = json.dumps(entries, ensure_ascii=False, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8", "surrogateescape")).hexdigest()


def read_seal(path: str | os.PathLike[str]) -> tuple[str, str, str]:
    """A run file's seal: (journal chain, stored content digest, recomputed content digest);
    the first two are "" when the file carries no seal (written before seals, or never closed)."""
    with h5py.File(path, "r") as f:
        chain = f.attrs.get("seal_journal_sha256", "")
        stored = f.attrs.get("seal_content_sha256", "")
        actual = content_digest(f)
    text = [v.decode() if isinstance(v, bytes) else str(v) for v in (chain, stored)]
    return text[0], text[1], actual


def _describe_columns(group: h5py.Group, names: Iterable[str]) -> None:
    """Descriptions, uncertainty kinds and the frequency_hz dimension scale on a group's columns."""
    scale = group["frequency_hz"]
    scale.make_scale("frequency_hz")
    for name in names:
        ds = group[name]
        ds.attrs["description"] = describe(name)
        if name.startswith("u_"):
            ds.attrs["uncertainty"] = "standard"
            ds.attrs["coverage_factor"] = 1.0
        elif name.startswith("U_"):
            ds.attrs["uncertainty"] = "expanded"
            ds.attrs["coverage_factor_dataset"] = "k"
        if name != "frequency_hz":
            ds.dims[0].attach_scale(scale)
            ds.dims[0].label = "frequency_hz"


def _plain_metadata(group: h5py.Group, md: Mapping[str, Any]) -> None:
    """What other languages need of the metadata, as plain attributes and string datasets."""
    group.attrs["description"] = "run metadata as plain values (the root attributes hold the same, some as JSON)"
    dut = md.get("dut") or {}
    g = group.create_group("dut")
    for key in ("board", "serial", "description"):
        g.attrs[key] = str(dut.get(key) or "")
    tags = [str(t) for t in (md.get("tags") or [])]
    ds = group.create_dataset("tags", data=np.array(tags, dtype=object), dtype=_STR_DTYPE)
    ds.attrs["description"] = "the run's tags"
    software = group.create_group("software")
    for key, value in (md.get("software") or {}).items():
        software.attrs[str(key)] = str(value)
    instruments = group.create_group("instruments")
    for i, ident in enumerate(md.get("instruments") or []):
        g = instruments.create_group(str(i))
        for key, value in (ident or {}).items():
            g.attrs[str(key)] = "" if value is None else str(value)


def _plain_interruptions(f: h5py.File, summary: Mapping[str, Any]) -> None:
    found = summary.get("interruptions") or []
    if "metadata" not in f or not isinstance(found, list):
        return
    group = f["metadata"].require_group("interruptions")
    group.attrs["description"] = "one group per interruption, in order: last write, resume, gap (s), reason"
    for i, item in enumerate(found):
        g = group.require_group(str(i))
        for key, value in (item or {}).items():
            g.attrs[str(key)] = value if isinstance(value, (int, float, bool)) else str(value)


def _check_format(f: h5py.File, path: Path) -> None:
    fmt = f.attrs.get("format")
    if isinstance(fmt, bytes):
        fmt = fmt.decode()
    if fmt != FORMAT_NAME:
        raise RunFileError(f"{path}: not a {FORMAT_NAME} file (format={fmt!r})")
    if int(f.attrs.get("format_version", -1)) not in READABLE_FORMAT_VERSIONS:
        raise RunFileError(f"{path}: unsupported format_version {f.attrs.get('format_version')!r}")


def _column(name: str, values: list[Any]) -> np.ndarray:
    kind = FIELD_KINDS[name]
    return np.array(values, dtype=object if kind is str else _NP_DTYPES[kind])


def _frame(columns: Mapping[str, np.ndarray]) -> pd.DataFrame:
    """int64, float64 and pandas' default string dtype ("str") columns in POINT_FIELDS order."""
    return pd.DataFrame(
        {name: pd.Series(columns[name], dtype="str" if FIELD_KINDS[name] is str else None) for name in POINT_FIELDS}
    )


def points_frame(points: Iterable[Point]) -> pd.DataFrame:
    """The points as a DataFrame laid out exactly as `read_run` returns them."""
    rows = [point_values(p) for p in points]
    return _frame({name: _column(name, [r[name] for r in rows]) for name in POINT_FIELDS})


def read_run(path: str | os.PathLike[str]) -> tuple[pd.DataFrame, dict[str, Any]]:
    """Read a run file: the points (columns POINT_FIELDS; int64, float64, str) and its metadata.

    Metadata holds the root attributes (JSON ones decoded), "plan_yaml", "prediction"
    ({name: float64 array}, including "frequency_hz"), "summary" ({} until finished) and
    "waveform_indexes" (sorted point indexes with kept waveforms). Reads unfinished files too.
    """
    path = Path(path)
    try:
        f = h5py.File(path, "r")
    except OSError as exc:
        raise RunFileError(f"{path}: cannot read run file: {exc}") from None
    with f:
        _check_format(f, path)
        group = f["points"]
        count = int(group.attrs["count"])
        columns: dict[str, np.ndarray] = {}
        for name in POINT_FIELDS:
            if name not in group:
                if name not in FIELD_DEFAULTS:
                    raise RunFileError(f"{path}: /points/{name} is missing")
                columns[name] = _column(name, [FIELD_DEFAULTS[name]] * count)
                continue
            ds = group[name]
            if ds.shape[0] < count:
                raise RunFileError(f"{path}: /points/{name} holds {ds.shape[0]} values, count is {count}")
            columns[name] = ds.asstr()[:count] if FIELD_KINDS[name] is str else ds[:count]
        frame = _frame(columns)
        metadata = _get_attrs(f.attrs)
        metadata["plan_yaml"] = f["plan/yaml"].asstr()[()]
        metadata["prediction"] = {name: ds[()] for name, ds in f["prediction"].items()}
        metadata["summary"] = _get_attrs(f["summary"].attrs) if "summary" in f else {}
        metadata["waveform_indexes"] = sorted(int(k) for k in f["waveforms"]) if "waveforms" in f else []
    return frame, metadata


def read_waveforms(path: str | os.PathLike[str], index: int) -> tuple[np.ndarray, float]:
    """The kept capture of point `index`: volts (2, N), V, and the sample interval, s."""
    with h5py.File(path, "r") as f:
        key = f"waveforms/{int(index)}"
        if key not in f:
            raise KeyError(f"{path}: no waveforms kept for point {index}")
        return f[key]["volts"][()], float(f[key].attrs["sample_interval_s"])


def _float_bits(values: np.ndarray) -> np.ndarray:
    return np.ascontiguousarray(values, dtype=np.float64).view(np.uint64)


def frames_identical(a: pd.DataFrame, b: pd.DataFrame) -> bool:
    """Same columns, dtypes and values; float columns compared bit for bit (NaN payloads too)."""
    if list(a.columns) != list(b.columns) or len(a) != len(b) or not a.dtypes.equals(b.dtypes):
        return False
    for name in a.columns:
        x, y = a[name].to_numpy(), b[name].to_numpy()
        if a[name].dtype == np.float64:
            if not np.array_equal(_float_bits(x), _float_bits(y)):
                return False
        elif not np.array_equal(x.astype(object), y.astype(object)):
            return False
    return True


def _finish_event(events: list[dict[str, Any]]) -> dict[str, Any] | None:
    """The finish event in force: the last one, unless a RESUMED_EVENT came after it (the run
    was taken up again by `sweeper resume` and is unfinished until its next finish event)."""
    for event in reversed(events):
        if event["kind"] == RESUMED_EVENT:
            return None
        if event["kind"] == FINISH_EVENT:
            return event
    return None


finish_event_in_force = _finish_event


def rebuild_runfile(journal_path: str | os.PathLike[str], runfile_path: str | os.PathLike[str]) -> None:
    """Write a complete run file from the journal alone, atomically (temp file + os.replace).

    The journal header must come from `run_header`. A `finished` event supplies the summary
    and end time. Waveforms are copied from the old run file when it is still readable.
    """
    journal_path, runfile_path = Path(journal_path), Path(runfile_path)
    contents = read_journal(journal_path)
    header = dict(contents.header)
    if isinstance(header.get("metadata"), dict) and "start_utc" not in header["metadata"]:
        header["metadata"] = {**header["metadata"], "start_utc": contents.created_utc}
    tmp = runfile_path.with_name(f".{runfile_path.name}.{os.getpid()}.rebuild")
    tmp.unlink(missing_ok=True)
    try:
        with RunWriter.from_header(tmp, header) as writer:
            writer.extend(contents.points)
            _copy_waveforms(runfile_path, writer)
            done = _finish_event(contents.events)
            if done is not None:
                writer.finish(done.get("summary") or {}, end_utc=done["time_utc"])
            if contents.sealed:
                writer.seal(contents.chain_sha256)
        fd = os.open(tmp, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
        os.replace(tmp, runfile_path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    _fsync_dir(runfile_path)


def _copy_waveforms(old_path: Path, writer: RunWriter) -> None:
    """Best effort: a damaged old file simply contributes no waveforms."""
    if not old_path.exists():
        return
    try:
        with h5py.File(old_path, "r") as old:
            if "waveforms" not in old:
                return
            waves = writer._file.require_group("waveforms")
            for name in old["waveforms"]:
                old.copy(old["waveforms"][name], waves, name=name)
    except Exception:  # noqa: BLE001 - any failure to read the damaged file means nothing to salvage
        return


def ensure_runfile(journal_path: str | os.PathLike[str], runfile_path: str | os.PathLike[str]) -> bool:
    """Rebuild the run file from the journal when it is missing, unreadable or stale (another
    run, other points, or finish state differing). Returns True when it rebuilt the file.
    Call it only while no writer of this run is running."""
    contents = read_journal(journal_path)
    try:
        frame, metadata = read_run(runfile_path)
    except Exception:  # noqa: BLE001 - any failure to read the run file means: rebuild it
        current = False
    else:
        current = (
            metadata.get("run_id") == contents.header.get("metadata", {}).get("run_id")
            and bool(metadata.get("finished")) == (_finish_event(contents.events) is not None)
            and frames_identical(frame, points_frame(contents.points))
        )
    if current:
        return False
    rebuild_runfile(journal_path, runfile_path)
    return True


def file_sha256(path: str | os.PathLike[str]) -> str:
    """SHA-256 of a file's bytes, lower-case hex."""
    digest = hashlib.sha256()
    with open(path, "rb") as stream:
        for block in iter(lambda: stream.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()
