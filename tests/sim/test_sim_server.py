"""The server loop in-process, with a scripted wall clock: tick grid, overruns, start-up line."""

from __future__ import annotations

import csv
import io
import os

import pytest

from rigloop.protocol import Status
from rigloop.sim.device import build_device
from rigloop.sim.server import LISTENING_PREFIX, ServerOptions, SimServer, UdpTransport


class ScriptedClock:
    """Advances ``step`` seconds per reading and jumps ``jump`` seconds once, at reading ``at``."""

    def __init__(self, step: float, at: int, jump: float):
        self.t = 1000.0
        self.step, self.at, self.jump = step, at, jump
        self.readings = 0

    def __call__(self) -> float:
        self.readings += 1
        self.t += self.step + (self.jump if self.readings == self.at else 0.0)
        return self.t


def run_server(tmp_path, clock, *, faults=(), quit_after=0.05, rate=1000.0):
    device = build_device("fan", rate_hz=rate, noise=0.0, faults=faults)
    trace = tmp_path / "trace.csv"
    rx_log = tmp_path / "rx.jsonl"
    out, err = io.StringIO(), io.StringIO()
    server = SimServer(device, UdpTransport("127.0.0.1", 0),
                       ServerOptions(clock="realtime", quit_after_s=quit_after, trace=trace,
                                     rx_log=rx_log),
                       stdout=out, stderr=err, clock=clock)
    assert server.run() == 0
    with open(trace, newline="") as f:
        rows = list(csv.DictReader(f))
    return device, server, rows, out.getvalue(), err.getvalue()


def test_realtime_ticks_stay_on_the_grid_and_a_missed_tick_flags_overrun(tmp_path):
    clock = ScriptedClock(step=0.0003, at=60, jump=0.0045)
    device, server, rows, out, _ = run_server(tmp_path, clock)
    assert server.stop_reason == "quit-after"
    t = [int(r["t_us"]) for r in rows]
    seq = [int(r["seq"]) for r in rows]
    status = [int(r["status"]) for r in rows]
    assert seq == list(range(len(rows)))
    assert all(x % 1000 == 0 for x in t)                       # never drifts off the grid
    flagged = [k for k, s in enumerate(status) if s & Status.OVERRUN]
    assert len(flagged) == 1
    k = flagged[0]
    assert device.overruns >= 3                                # a 4.5-period jump
    assert t[k] - t[k - 1] == (device.overruns + 1) * 1000     # skipped to the newest grid point
    assert all(t[j] - t[j - 1] == 1000 for j in range(1, len(t)) if j != k)
    assert t[-1] >= 50_000
    assert out.splitlines() == [LISTENING_PREFIX + server.transport.url]
    assert server.transport.url.startswith("udp://127.0.0.1:")
    assert {r["tx"] for r in rows} == {"no-peer"}              # nobody has spoken to it yet


def test_ignore_stop_warns_on_start(tmp_path):
    clock = ScriptedClock(step=0.0005, at=0, jump=0.0)
    _, _, _, _, err = run_server(tmp_path, clock, faults=["ignore-stop"], quit_after=0.01)
    assert "WARNING" in err and "ignores STOP" in err


def test_logs_are_complete_after_the_run(tmp_path):
    clock = ScriptedClock(step=0.0004, at=0, jump=0.0)
    device, _, rows, _, _ = run_server(tmp_path, clock, quit_after=0.02)
    assert len(rows) == device.ticks
    assert list(rows[0])[:6] == ["t_us", "seq", "applied", "status", "last_cmd_seq", "tx"]
    assert list(rows[0])[6:] == ["speed_rpm", "current_a", "airflow_m3h", "temp_c"]
    assert (tmp_path / "rx.jsonl").read_text() == ""          # nothing was received


@pytest.mark.skipif(not hasattr(os, "openpty"), reason="needs a POSIX pseudo-terminal")
def test_a_frame_cut_short_on_the_pty_costs_only_itself(monkeypatch):
    """After a short write the next frame starts with a delimiter, so the host's decoder loses
    the cut frame only; the failure is counted (and traced as tx-error by the server)."""
    from rigloop.sim import server

    transport = server.PtyTransport()
    try:
        transport.has_peer = True
        writes = []

        def fake_write(fd, data):
            writes.append(bytes(data))
            return len(data) // 2 if len(writes) == 1 else len(data)

        monkeypatch.setattr(server.os, "write", fake_write)
        transport.send(b"\x01\x02\x03\x04")
        transport.send(b"\x05\x06\x07\x08")
        transport.send(b"\x09\x0a\x0b\x0c")
        assert transport.tx_errors == 1
        assert writes[1].startswith(b"\x00") and not writes[0].startswith(b"\x00")
        assert not writes[2].startswith(b"\x00")          # only right after the cut
    finally:
        transport.close()
