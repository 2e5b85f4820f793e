"""Catalog figure: insert and query times for a catalog of 10,000 runs.

Invented rows (stations, serials, plans, a year of start times) go into a fresh SQLite catalog
in a temporary folder, once one transaction per run (as runs are filed) and once in bulk (as
`rebuild` does). Each query is then timed as the median of repeated calls. A second, smaller
part files real HDF5 run files to show the per-file cost of filing and verifying.

Usage: python bench/bench_catalog.py [--runs 10000] [--files 100] [--repeat 20]
"""

from __future__ import annotations

import argparse
import datetime as dt
import random
import statistics
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from sweeper.measure.point import Point, Verdict
from sweeper.store.catalog import Catalog, RunRecord, default_catalog_path, rebuild, verify
from sweeper.store.runfile import RunWriter

PLAN_YAML = (Path(__file__).resolve().parents[1] / "configs" / "rc-antialias.yaml").read_text(encoding="utf-8")
VERDICTS = ["PASS"] * 80 + ["FAIL"] * 10 + ["PASS_UNCERTAIN"] * 5 + ["FAIL_UNCERTAIN"] * 3 + ["NOT_JUDGED"] * 2


def invented_runs(n: int, seed: int = 7) -> list[RunRecord]:
    """n invented runs: 20 stations, n/5 serials, 5 plans, start times over 2024."""
    rng = random.Random(seed)
    year_start = dt.datetime(2024, 1, 1, tzinfo=dt.timezone.utc)
    runs = []
    for i in range(n):
        start = year_start + dt.timedelta(seconds=rng.randrange(366 * 86400))
        serial = f"DLF7-{rng.randrange(max(1, n // 5)):06d}"
        run_id = f"{start:%Y%m%dT%H%M%SZ}-{serial}-{i:05x}"
        plan = f"plan-{rng.randrange(5)}"
        runs.append(RunRecord(
            run_id=run_id, start_utc=start.isoformat().replace("+00:00", "Z"),
            end_utc=(start + dt.timedelta(seconds=90)).isoformat().replace("+00:00", "Z"),
            board="DLF-7 anti-alias stage", serial=serial, plan_name=plan,
            plan_sha256=f"{rng.getrandbits(256):064x}", station=f"STN-{rng.randrange(20):02d}",
            operator="bench technician", verdict=rng.choice(VERDICTS), status="complete",
            file_path=f"{run_id}.h5", file_sha256=f"{rng.getrandbits(256):064x}",
            campaign=f"campaign-{rng.randrange(10)}", retest=False, points_measured=21, points_planned=21,
        ))
    return runs


def median_ms(call: Callable[[], Any], repeat: int) -> tuple[float, Any]:
    """Median wall time of `call` over `repeat` calls, ms, and its last result."""
    times, result = [], None
    for _ in range(repeat):
        t0 = time.perf_counter()
        result = call()
        times.append(time.perf_counter() - t0)
    return 1e3 * statistics.median(times), result


def bench_rows(folder: Path, runs: list[RunRecord], repeat: int) -> None:
    n = len(runs)
    print(f"catalog of {n} runs (SQLite {__import__('sqlite3').sqlite_version}, WAL)")
    with Catalog(folder / "one-by-one.sqlite") as catalog:
        t0 = time.perf_counter()
        for run in runs:
            catalog.add(run)
        each_s = time.perf_counter() - t0
    print(f"  insert, one transaction per run : {each_s:8.2f} s total, {1e3 * each_s / n:7.3f} ms per run")
    with Catalog(folder / "bulk.sqlite") as catalog:
        t0 = time.perf_counter()
        catalog.add_many(runs)
        bulk_s = time.perf_counter() - t0
        print(f"  insert, all in one transaction  : {bulk_s:8.2f} s total, {1e3 * bulk_s / n:7.3f} ms per run")
        some = runs[n // 2]
        queries: list[tuple[str, Callable[[], Any]]] = [
            ("count()", catalog.count),
            ("find(serial=...)", lambda: catalog.find(serial=some.serial)),
            ("serial_seen(...)", lambda: catalog.serial_seen(some.serial)),
            ("find(since, until) one day", lambda: catalog.find(since="2024-06-01", until="2024-06-01")),
            ("find(since, until) one month", lambda: catalog.find(since="2024-06-01", until="2024-06-30")),
            ("find(verdict=FAIL, station=...)", lambda: catalog.find(verdict="FAIL", station=some.station)),
            ("find(plan=...)", lambda: catalog.find(plan=some.plan_name)),
            ("find(limit=50) newest", lambda: catalog.find(limit=50)),
            ("get(unique prefix)", lambda: catalog.get(some.run_id[:-2])),
            ("find() all rows", catalog.find),
        ]
        print(f"  query (median of {repeat})              time, ms    rows")
        for label, call in queries:
            ms, result = median_ms(call, repeat)
            rows = len(result) if isinstance(result, list) else (1 if isinstance(result, RunRecord) else result)
            print(f"    {label:34s} {ms:9.3f} {rows!s:>7}")


def bench_files(folder: Path, n_files: int) -> None:
    runs_dir = folder / "runs"
    runs_dir.mkdir()
    freq = np.geomspace(10.0, 100e3, 21)
    paths = []
    for i in range(n_files):
        path = runs_dir / f"RUN-{i:05d}.h5"
        metadata = {"run_id": path.stem, "plan_name": "rc-antialias", "plan_yaml": PLAN_YAML,
                    "start_utc": f"2024-05-01T08:{i // 60 % 60:02d}:{i % 60:02d}Z",
                    "dut": {"board": "DLF-7 anti-alias stage", "serial": f"DLF7-{i % 7:06d}"}, "station": "STN-A3"}
        with RunWriter(path, metadata, freq, {"model_gain_db": np.zeros_like(freq)}) as writer:
            writer.extend(Point(k, float(f), -0.1, -5.0, 0.01, 0.1, 1.0, 0.9, verdict=1) for k, f in enumerate(freq))
            writer.finish({"status": "complete", "verdict": Verdict.PASS.name})
        paths.append(path)
    size_kb = paths[0].stat().st_size / 1024
    print(f"real run files: {n_files} files of {size_kb:.0f} kB (21 points, no waveforms)")
    with Catalog(default_catalog_path(runs_dir)) as catalog:
        t0 = time.perf_counter()
        for path in paths:
            catalog.add_runfile(path)
        file_s = time.perf_counter() - t0
        t0 = time.perf_counter()
        results = verify(catalog)
        verify_s = time.perf_counter() - t0
    assert all(r.state == "ok" for r in results)
    t0 = time.perf_counter()
    rebuild(default_catalog_path(runs_dir), runs_dir).close()
    rebuild_s = time.perf_counter() - t0
    for label, total in (("add_runfile (read + hash + insert)", file_s), ("verify (hash + HDF5 open)", verify_s),
                         ("rebuild (scan + read + hash)", rebuild_s)):
        print(f"  {label:36s} {1e3 * total / n_files:7.2f} ms per file")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=10_000)
    parser.add_argument("--files", type=int, default=100)
    parser.add_argument("--repeat", type=int, default=20)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="bench-catalog-") as tmp:
        bench_rows(Path(tmp), invented_runs(args.runs), args.repeat)
        if args.files > 0:
            bench_files(Path(tmp), args.files)


if __name__ == "__main__":
    main()
