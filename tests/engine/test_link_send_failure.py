"""A COMMAND the link cannot take (a serial write that times out because the device stopped
reading) is a lost link: the engine trips with cause link-lost and a clean recording, not an
exception out of the run (safety.md: every failure ends in a safe output and a recorded trip)."""

from __future__ import annotations

import pytest

from engine_helpers import fan_config, run_engine

pytestmark = pytest.mark.slow


def test_a_command_the_link_cannot_take_trips_link_lost(tmp_path, monkeypatch):
    from rigloop.link.base import LinkError
    from rigloop.link.udp import UdpLink
    from rigloop.protocol.messages import Command

    real_send = UdpLink.send
    commands = {"n": 0}

    def send_then_fail(self, msg):
        if isinstance(msg, Command):
            commands["n"] += 1
            if commands["n"] == 150:
                raise LinkError("write did not finish within 100 ms (injected)")
        return real_send(self, msg)

    monkeypatch.setattr(UdpLink, "send", send_then_fail)
    result, session, _ = run_engine(fan_config(tmp_path), tmp_path, duration_s=3.0, rx_log=False)
    assert result.outcome == "tripped"
    assert result.trip.cause == "link-lost"
    assert "injected" in result.trip.message
    assert session.meta["outcome"] == "tripped" and session.meta["trip"]["cause"] == "link-lost"
    tripped = session.samples[session.samples.state == "tripped"]
    assert len(tripped) > 0 and (tripped.u_cmd == session.meta["config"]["actuator"]["safe"]).all()
