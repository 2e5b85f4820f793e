"""Station profiles: located problems, hashes, and a plan whose hash does not depend on the station."""

import hashlib

import pytest

from sweeper.plan.loader import load_plan
from sweeper.station import StationError, bench_with_station, load_station, load_station_text

STATION_A = """station: 1
name: Bay A (invented)
instruments:
  source: {resource: "TCPIP0::127.0.0.1::5025::SOCKET", driver: gen.yaml, backend: "@py", timeout: 3}
  scope: {resource: "TCPIP0::127.0.0.1::5026::SOCKET", driver: scope.yaml}
output: runs-a
operator: {identify: fixed, name: tester-1}
"""
STATION_B = STATION_A.replace("Bay A", "Bay B").replace("5026", "5027").replace("runs-a", "runs-b")


def test_problem_is_located_with_file_line_field_given_expected(tmp_path):
    path = tmp_path / "bad.yaml"
    path.write_text(STATION_A.replace("timeout: 3", "timeout: -1"))
    with pytest.raises(StationError) as err:
        load_station(path)
    (problem,) = err.value.problems
    assert problem.file == str(path) and problem.line == 4
    assert problem.loc == ("instruments", "source", "timeout")
    assert problem.given == "-1" and problem.expected == "above 0"


def test_unknown_role_and_missing_name_are_both_reported():
    text = STATION_A.replace("name: Bay A (invented)\n", "").replace("scope:", "scoop:")
    with pytest.raises(StationError) as err:
        load_station_text(text, "s.yaml")
    locs = {p.loc for p in err.value.problems}
    assert ("name",) in locs
    assert any(loc[:1] == ("instruments",) for loc in locs)


def test_same_plan_two_stations_same_plan_hash_both_station_hashes(tmp_path):
    a, b = tmp_path / "a.yaml", tmp_path / "b.yaml"
    a.write_text(STATION_A)
    b.write_text(STATION_B)
    plan = load_plan("configs/rc-antialias.yaml")
    before = plan._sha256
    sa, sb = load_station(a), load_station(b)
    bench_a, bench_b = bench_with_station(plan.bench, sa), bench_with_station(plan.bench, sb)
    # hashlib is the outside reference for the SHA-256 of the bytes as written
    assert sa.sha256 == hashlib.sha256(a.read_bytes()).hexdigest()
    assert sb.sha256 == hashlib.sha256(b.read_bytes()).hexdigest() != sa.sha256
    assert plan._sha256 == before == hashlib.sha256(open("configs/rc-antialias.yaml", "rb").read()).hexdigest()
    assert bench_a.kind == bench_b.kind == "visa"
    assert bench_a.scope.resource.endswith("5026::SOCKET") and bench_b.scope.resource.endswith("5027::SOCKET")
    assert bench_a.source.driver == str(tmp_path / "gen.yaml") and bench_a.visa_library == "@py"
    assert bench_a.source.timeout_s == 3.0


def test_cli_bad_station_file_exits_2_with_located_message(tmp_path):
    from click.testing import CliRunner

    from sweeper.cli import main

    path = tmp_path / "s.yaml"
    path.write_text(STATION_A.replace("timeout: 3", "timeout: 0"))
    result = CliRunner().invoke(main, ["check", "configs/rc-antialias.yaml", "--station", str(path)])
    assert result.exit_code == 2, result.output
    assert f"{path}:4:" in result.output and "instruments.source.timeout" in result.output
    assert "Traceback" not in result.output


def test_plan_metadata_records_station_file_and_hash(tmp_path):
    from sweeper.run.spec import plan_metadata

    path = tmp_path / "a.yaml"
    path.write_text(STATION_A)
    plan = load_plan("configs/rc-antialias.yaml")
    station = load_station(path)
    plan.bench = bench_with_station(plan.bench, station)
    plan._station = station
    meta = plan_metadata(plan)
    assert meta["station_sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
    assert meta["station_yaml"] == STATION_A and meta["station_path"] == str(path)
    assert meta["plan_sha256"] == hashlib.sha256(open("configs/rc-antialias.yaml", "rb").read()).hexdigest()
