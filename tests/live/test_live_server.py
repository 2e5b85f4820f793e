"""The live view's server over real loopback sockets: where it listens, what it serves, how it
follows a journal that grows (and tolerates a torn last line)."""

from __future__ import annotations

import http.client
import json
import os
import subprocess
import sys
import threading
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from live_rig import DEMO_PLAN, recorded_run

from sweeper.cli import main
from sweeper.verdict import VERDICT_LABELS
from sweeper.live import LiveError, find_source, is_loopback, make_server, read_snapshot
from sweeper.measure.point import Verdict
from sweeper.plan import load_plan
from sweeper.run.runner import execute_run
from sweeper.store.journal import Journal


@pytest.fixture(scope="module")
def recorded(tmp_path_factory: pytest.TempPathFactory):
    return recorded_run(tmp_path_factory.mktemp("recorded"))


@pytest.fixture
def serving(tmp_path: Path, recorded):
    """A new journal with the recorded header and no points yet, served on loopback."""
    header, points, summary = recorded
    journal = Journal.create(tmp_path / "live.journal", header)
    server = make_server(journal.path)
    thread = threading.Thread(target=server.serve_forever, kwargs={"poll_interval": 0.05}, daemon=True)
    thread.start()
    yield server, journal, points, summary
    server.shutdown()
    server.server_close()
    journal.close()


def get(server, path: str, host: str | None = None) -> tuple[int, bytes]:
    host_name, port = server.server_address[:2]
    conn = http.client.HTTPConnection(host_name, port, timeout=30)
    headers = {"Host": host} if host else {}
    conn.request("GET", path, headers=headers)
    reply = conn.getresponse()
    body = reply.read()
    conn.close()
    return reply.status, body


def state(server) -> dict:
    status, body = get(server, "/state.json")
    assert status == 200
    return json.loads(body)


def test_default_address_is_loopback_and_others_are_refused(tmp_path: Path, recorded) -> None:
    header, _, _ = recorded
    journal = Journal.create(tmp_path / "a.journal", header)
    journal.close()
    server = make_server(journal.path)
    try:
        assert server.server_address[0] == "127.0.0.1"
        assert server.url.startswith("http://127.0.0.1:")
    finally:
        server.server_close()
    for host in ("0.0.0.0", "192.0.2.10", "example.org"):  # 192.0.2.0/24: TEST-NET-1 (RFC 5737)
        with pytest.raises(LiveError, match="loopback"):
            make_server(journal.path, host)
    assert is_loopback("127.0.0.1") and is_loopback("::1") and is_loopback("localhost")
    assert not is_loopback("0.0.0.0")


def test_watch_command_listens_on_loopback_by_default(tmp_path: Path, recorded) -> None:
    header, points, _ = recorded
    with Journal.create(tmp_path / "w.journal", header) as journal:
        for p in points[:4]:
            journal.append_point(p)
    proc = subprocess.Popen([sys.executable, "-m", "sweeper", "watch", str(journal.path), "--port", "0"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env={**os.environ, "COLUMNS": "200"})
    try:
        proc.stdout.readline()  # "watching <journal>"
        url_line = proc.stdout.readline()
        assert url_line.startswith("open http://127.0.0.1:"), url_line + proc.stderr.read()
        port = int(url_line.split(":")[2].split("/")[0])
        conn = http.client.HTTPConnection("127.0.0.1", port, timeout=30)
        conn.request("GET", "/state.json")
        data = json.loads(conn.getresponse().read())
        conn.close()
        assert data["points"] == 4 and data["planned"] == len(points)
    finally:
        proc.terminate()
        proc.wait(timeout=30)


def test_watch_command_refuses_what_it_cannot_find(tmp_path: Path) -> None:
    result = CliRunner().invoke(main, ["watch", "no-such-run", "--runs", str(tmp_path)])
    assert result.exit_code == 2 and "no such journal" in result.output


def test_state_follows_the_journal_and_ignores_a_torn_tail(serving) -> None:
    server, journal, points, _ = serving
    first = state(server)
    assert first["points"] == 0 and first["planned"] == len(points) and not first["finished"]
    for p in points[:7]:
        journal.append_point(p)
    s = state(server)
    assert s["points"] == 7 and s["version"] > first["version"] and s["status"] == "running"
    # Verdict counts: the points' own verdicts, counted here.
    expected = {VERDICT_LABELS[v]: sum(p.verdict == v for p in points[:7]) for v in Verdict}
    assert s["verdicts"] == expected
    assert s["last"]["frequency_hz"] == points[6].frequency_hz
    # A writer caught mid-line: half a record at the end is not a point yet, and not an error.
    with open(journal.path, "ab") as fh:
        fh.write(b'{"crc32":"0000')
    s = state(server)
    assert s["points"] == 7 and s["error"] == ""


def test_finished_run_reports_its_verdict(serving) -> None:
    server, journal, points, summary = serving
    for p in points:
        journal.append_point(p)
    journal.append_event("finished", summary=summary)
    s = state(server)
    assert s["finished"] and s["status"] == "complete" and s["run_verdict"] == summary["verdict"]
    assert s["points"] == s["planned"] == len(points)


def test_plot_is_svg_redrawn_only_when_the_journal_grows(serving) -> None:
    server, journal, points, _ = serving
    for p in points[:3]:
        journal.append_point(p)
    status, first = get(server, "/plot.svg")
    assert status == 200 and ET.fromstring(first).tag.endswith("svg")
    assert get(server, "/plot.svg")[1] == first  # nothing new: the same drawing
    journal.append_point(points[3])
    assert get(server, "/plot.svg")[1] != first


def test_page_and_routes(serving) -> None:
    server, *_ = serving
    status, page = get(server, "/")
    text = page.decode("utf-8")
    assert status == 200 and 'src="plot.svg' in text and 'fetch("state.json"' in text
    assert "http://" not in text and "https://" not in text  # nothing fetched from elsewhere
    assert get(server, "/../../etc/passwd")[0] == 404
    assert get(server, "/state.json", host="attacker.example")[0] == 403  # DNS rebinding guard
    assert get(server, "/state.json", host=f"localhost:{server.server_address[1]}")[0] == 200


def test_json_state_is_plain_json(serving) -> None:
    server, journal, points, _ = serving
    for p in points[:2]:
        journal.append_point(p)
    status, body = get(server, "/state.json")
    data = json.loads(body)  # the standard parser: no NaN or Infinity tokens
    assert status == 200 and all(np.isfinite(v) for v in data["last"].values() if isinstance(v, float))


def test_a_run_is_found_by_file_by_id_or_by_prefix_and_its_journal_preferred(tmp_path: Path, recorded) -> None:
    outcome = execute_run(load_plan(DEMO_PLAN), tmp_path)
    run_id = outcome.run_id
    assert find_source(str(outcome.run_path), tmp_path) == outcome.journal_path  # the run may still be going
    assert find_source(run_id, tmp_path) == outcome.journal_path
    assert find_source(run_id[:20], tmp_path) == outcome.journal_path  # a unique prefix
    assert find_source("20991231T", tmp_path) is None
    # Without its journal a finished run is shown from its run file, with the same points.
    from_journal = read_snapshot(outcome.journal_path)
    outcome.journal_path.unlink()
    assert find_source(run_id, tmp_path) == outcome.run_path
    from_file = read_snapshot(outcome.run_path)
    assert from_file.points == from_journal.points == len(outcome.points)
    assert from_file.finished and from_file.as_json()["run_verdict"] == from_journal.as_json()["run_verdict"]
