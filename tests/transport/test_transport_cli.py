"""The transport commands: `bench serve`, `instruments`, `driver check`, `driver try` (loopback only)."""

from __future__ import annotations

import json
import random
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
import pyvisa
from transport_rig import rc_plan, sweeper_in_process

from sweeper.run.spec import sim_config
from sweeper.instruments.driverfile import repository_drivers_dir
from sweeper.sim.serve import serve_bench

DRIVERS = repository_drivers_dir()


@pytest.fixture(scope="module")
def served(tmp_path_factory: pytest.TempPathFactory):
    """The four simulated instruments on four consecutive loopback ports, for the whole module."""
    plan = rc_plan(tmp_path_factory.mktemp("served") / "dut.yaml")
    rng = random.Random(6)  # a fixed sequence of candidate bases; the first free one is used
    for _ in range(50):
        try:
            handle = serve_bench(sim_config(plan), ports=rng.randrange(20000, 60000))
            break
        except OSError:
            continue
    else:
        pytest.fail("no four consecutive free loopback ports found")
    with handle:
        yield handle


def test_instruments_finds_loopback_servers_and_names_their_drivers(served) -> None:
    ports = sorted(served.ports.values())
    span = f"{ports[0] - 1}-{ports[-1] + 1}"  # the four servers and a silent port either side
    code, out, err = sweeper_in_process("instruments", "--scan-local", span, "--timeout", "2", "--json")
    assert code == 0, err
    found = {item["resource"]: item for item in json.loads(out)}
    assert len(found) == 4  # only the listening ports were asked
    for name, driver in (("generator", "sim-generator.yaml"), ("scope-a", "sim-scope-a.yaml"),
                         ("scope-b", "sim-scope-b.yaml"), ("meter", "sim-meter.yaml")):
        item = found[served.resources[name]]
        assert item["idn"].startswith("Sweeper Sim,")  # DIALECTS.md identities
        assert item["drivers"] == [driver]


def test_instruments_probe_prints_a_table_and_reports_silence(served, tmp_path: Path) -> None:
    silent = "TCPIP0::127.0.0.1::9::SOCKET"  # discard port: nothing listens on loopback here
    code, out, err = sweeper_in_process("instruments", "--probe", served.resources["meter"],
                                        "--probe", silent, "--timeout", "0.5")
    assert code == 0, err
    assert "Sweeper Sim,RATIO-1" in out and "sim-meter.yaml" in out
    assert re.search(r"cannot open|no answer", out)


def test_instruments_on_the_simulated_backend_lists_all_four() -> None:
    code, out, err = sweeper_in_process("instruments", "--backend", "@sim", "--json")
    assert code == 0, err
    found = {item["resource"]: item["drivers"] for item in json.loads(out)}
    assert found["TCPIP0::sim-scope-b::5025::SOCKET"] == ["sim-scope-b.yaml"]
    assert len(found) == 4


#: Run in a fresh interpreter: record every destination Python's socket layer is asked to reach
#: (PEP 578 audit events socket.connect, socket.sendto, socket.sendmsg, and the host names it
#: resolves, socket.getaddrinfo / gethostbyname), then run `sweeper instruments` with the
#: arguments given, and print what was recorded as JSON on the last line of stderr. A loopback
#: UDP datagram sent first proves the hook sees sendto (the way LAN broadcasts go out).
AUDITED = """
import json, socket, sys
seen = []
def hook(event, args):
    if event in ("socket.connect", "socket.sendto", "socket.sendmsg"):
        seen.append([event, repr(args[1]) if not isinstance(args[1], (tuple, str)) else args[1]])
    elif event in ("socket.getaddrinfo", "socket.gethostbyname"):
        seen.append([event, args[0]])
sys.addaudithook(hook)
probe = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
probe.sendto(b"audit self-test", ("127.0.0.1", 9))
probe.close()
from sweeper.cli import main
code = 1
try:
    main(sys.argv[1:], standalone_mode=True)
except SystemExit as exc:
    code = exc.code
finally:
    print(json.dumps(seen, default=str), file=sys.stderr)
sys.exit(code)
"""
LOOPBACK = {"127.0.0.1", "::1", "localhost"}


def audited_destinations(*args: str) -> tuple[int, list[list]]:
    done = subprocess.run([sys.executable, "-c", AUDITED, *args], capture_output=True, text=True, timeout=120)
    return done.returncode, json.loads(done.stderr.strip().splitlines()[-1])


def is_loopback(event: str, target: object) -> bool:
    if isinstance(target, str):  # a unix socket path, or a host name being resolved
        return target in LOOPBACK if event.startswith("socket.get") else True
    host = target[0] if isinstance(target, (list, tuple)) else target
    return host in LOOPBACK


def test_default_discovery_sends_nothing_beyond_loopback(served) -> None:
    # The network rule of the project: defaults send nothing off the machine. `instruments`
    # with no options on the default backend (pyvisa-py, whose own listing broadcasts on the
    # LAN) must not list through the backend; with --scan-local it talks to loopback only.
    code, seen = audited_destinations("instruments")
    assert code == 0
    assert seen[0][0] == "socket.sendto" and tuple(seen[0][1]) == ("127.0.0.1", 9)  # the hook works
    assert all(is_loopback(event, target) for event, target in seen), seen
    ports = sorted(served.ports.values())
    code, seen = audited_destinations("instruments", "--scan-local", f"{ports[0]}-{ports[-1]}", "--json")
    assert code == 0
    connects = [target for event, target in seen if event == "socket.connect"]
    assert len(connects) >= 8  # each port tried once, then asked *IDN? by pyvisa-py
    assert all(is_loopback(event, target) for event, target in seen), seen


def test_instruments_help_says_lan_discovery_needs_lan() -> None:
    code, out, _ = sweeper_in_process("instruments", "--help")
    assert code == 0 and "--lan" in out and "broadcasts" in out and "--list" not in out


def test_instruments_rejects_bad_options() -> None:
    code, _, err = sweeper_in_process("instruments", "--scan-local", "5025-x")
    assert code == 2 and "--scan-local" in err
    code, _, err = sweeper_in_process("instruments", "--backend", "/nonexistent/libvisa.so")
    assert code == 2 and "not found" in err


BROKEN = """\
format: 1
name: Invented generator CG-9 (no such vendor)
role: source
identify: ['^NoSuchVendor,CG-9,']
source:
  frequency_hz: {min: 1, max: 1.0e+6}
  amplitude_vpp: {min: 0.01, max: 10}
  operations:
    reset:
      - write: "*RST"
    set_amplitude:
      - write: "AMPL {amplitude_vpp"
    set_offset:
      - write: "OFFS {offset_v}"
    set_frequency:
      - write: "FREQ {frequency_hz}"
    output_on: [{write: "OUT 1"}]
    output_off: [{write: "OUT 0"}]
"""


def test_driver_check_reports_a_broken_template_with_its_line(tmp_path: Path) -> None:
    path = tmp_path / "cg9.yaml"
    path.write_text(BROKEN)
    code, _, err = sweeper_in_process("driver", "check", str(path))
    assert code == 2
    line = BROKEN.splitlines().index('      - write: "AMPL {amplitude_vpp"') + 1  # 1-based line of the template
    assert f"{path}:{line}:" in err
    assert "set_amplitude[0].write" in err and "unclosed" in err


def test_driver_check_reports_an_unknown_placeholder_with_its_line(tmp_path: Path) -> None:
    text = BROKEN.replace("AMPL {amplitude_vpp", "AMPL {amplitude}")
    path = tmp_path / "cg9.yaml"
    path.write_text(text)
    code, _, err = sweeper_in_process("driver", "check", str(path))
    assert code == 2
    line = text.splitlines().index('      - write: "AMPL {amplitude}"') + 1
    assert f"{path}:{line}:" in err and "{amplitude}" in err


def test_driver_check_passes_the_shipped_drivers_and_warns_on_risky_ones(tmp_path: Path) -> None:
    code, out, err = sweeper_in_process("driver", "check", *sorted(str(p) for p in DRIVERS.glob("sim-*.yaml")))
    assert code == 0, err
    assert out.count(": ok: ") == 4
    risky = BROKEN.replace("AMPL {amplitude_vpp", "AMPL {amplitude_vpp}").replace(
        "identify: ['^NoSuchVendor,CG-9,']", "identify: ['.*']")
    path = tmp_path / "risky.yaml"
    path.write_text(risky)
    code, out, err = sweeper_in_process("driver", "check", str(path))
    assert code == 0  # warnings do not make a file unusable
    line = risky.splitlines().index("identify: ['.*']") + 1
    assert f"warning: {path}:{line}:" in err and "matches any answer" in err


@pytest.mark.parametrize("name, driver, expect", [
    ("generator", "sim-generator.yaml", ["read back frequency", "output off"]),
    ("scope-a", "sim-scope-a.yaml", ["capture", "scaling", "scope measurements"]),
    ("scope-b", "sim-scope-b.yaml", ["capture", "scaling"]),
    ("meter", "sim-meter.yaml", ["measure"]),
])
def test_driver_try_passes_on_the_matching_instrument(served, name: str, driver: str, expect: list[str]) -> None:
    code, out, err = sweeper_in_process("driver", "try", str(DRIVERS / driver), served.resources[name])
    assert code == 0, out + err
    for step in ["open", "identity", "init", *expect, "error queue"]:
        assert re.search(rf"{re.escape(step)}\s+│\s+ok\b", out), step
    if name == "scope-a":
        assert re.search(r"2 x \d+ samples", out)
    assert not served.bench.generator.output_on  # a try never leaves the source on


def test_driver_try_stops_at_a_wrong_identity(served) -> None:
    code, out, err = sweeper_in_process("driver", "try", str(DRIVERS / "sim-scope-b.yaml"), served.resources["scope-a"])
    assert code == 3
    assert re.search(r"identity\s+│\s+failed", out) and re.search(r"capture\s+│\s+skipped", out)
    assert "identity" in err


def test_bench_serve_command_serves_until_terminated(tmp_path: Path) -> None:
    plan_path = tmp_path / "dut.yaml"
    plan_path.write_text(rc_plan(plan_path).source_text)
    proc = subprocess.Popen([sys.executable, "-m", "sweeper", "bench", "serve", str(plan_path), "--base-port", "0",
                             "--instrument", "generator", "--instrument", "meter"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        resources = {}
        deadline = time.monotonic() + 30
        while len(resources) < 2 and time.monotonic() < deadline:
            line = proc.stdout.readline()
            if not line:
                break
            m = re.match(r"\s+(generator|meter)\s+(TCPIP0::127\.0\.0\.1::\d+::SOCKET)\s", line)
            if m:
                resources[m.group(1)] = m.group(2)
        assert set(resources) == {"generator", "meter"}, proc.stderr.read() if proc.poll() is not None else ""
        rm = pyvisa.ResourceManager("@py")
        try:
            gen = rm.open_resource(resources["generator"], read_termination="\n", write_termination="\n",
                                   timeout=2000)
            assert gen.query("*IDN?").startswith("Sweeper Sim,STIM-1,")
        finally:
            rm.close()
        proc.send_signal(signal.SIGTERM)
        out, err = proc.communicate(timeout=20)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == 0, err
    assert "stopped; messages served: generator 1" in out


def test_bench_serve_refuses_a_remote_host_without_the_option(tmp_path: Path) -> None:
    plan_path = tmp_path / "dut.yaml"
    plan_path.write_text(rc_plan(plan_path).source_text)
    code, _, err = sweeper_in_process("bench", "serve", str(plan_path), "--host", "0.0.0.0")
    assert code == 2 and "allow_remote" in err


def test_driver_try_refuses_a_text_that_is_no_resource_name() -> None:
    code, out, err = sweeper_in_process("driver", "try", str(DRIVERS / "sim-meter.yaml"), "scope-on-bench-3")
    assert code == 2 and "not a VISA resource name" in err and "Traceback" not in out + err
