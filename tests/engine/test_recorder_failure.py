"""A recording that fails mid-run (disk full, medium gone) or cannot start: the rig stops at once,
the trip is recorded with its cause, every CSV row on disk is whole, and nothing is a traceback."""

from __future__ import annotations

import errno
import os
import shutil
import subprocess
import uuid

import numpy as np
import pandas as pd
import pytest
import yaml

from engine_helpers import DEMO_FAN, fan_config, read_rx_log

pytestmark = pytest.mark.slow


class FullAfter:
    """A raw file that takes ``budget`` bytes, then fails like a full disk: a short write of
    what still fits, then ENOSPC - what os.write does when the disk fills mid-chunk."""

    def __init__(self, path, budget: int):
        self._fh = open(path, "wb", buffering=0)
        self.budget = budget

    def write(self, data) -> int:
        if self.budget <= 0:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        n = self._fh.write(bytes(data[: self.budget]))
        self.budget -= n
        return n

    def __getattr__(self, name):
        return getattr(self._fh, name)


def samples_opener(budget: int):
    def opener(path):
        return FullAfter(path, budget) if path.name == "samples.csv" else open(path, "wb", buffering=0)
    return opener


def assert_whole_rows(path, n_columns: int) -> int:
    """Every line of a CSV is a complete row: pandas and numpy agree with the line count."""
    raw = path.read_bytes()
    assert raw.endswith(b"\n")
    lines = raw.decode().splitlines()
    assert all(line.count(",") == n_columns - 1 for line in lines)
    frame = pd.read_csv(path)
    assert len(frame) == len(lines) - 1
    array = np.genfromtxt(path, delimiter=",", names=True, dtype=None, encoding="utf-8")
    assert array.size == len(frame)
    return len(frame)


def test_disk_full_mid_run_trips_recorder_failed_with_whole_rows(tmp_path):
    from rigloop.engine.loop import Engine

    cfg = fan_config(tmp_path)
    engine = Engine(cfg, duration_s=10.0, sim_extra={"rx_log": str(tmp_path / "rx.jsonl")})
    engine.recorder_opener = samples_opener(150_000)        # roughly 1.5 s of rows, then full
    result = engine.run()
    assert result.exit_code == 3 and result.outcome == "tripped"
    assert result.trip.cause == "recorder-failed" and "ENOSPC" in result.trip.message
    meta = yaml.safe_load((result.session_dir / "session.yaml").read_text())
    assert meta["outcome"] == "tripped" and meta["trip"]["cause"] == "recorder-failed"
    assert "ENOSPC" in meta["recording_error"]
    header = (result.session_dir / "samples.csv").read_text().splitlines()[0]
    rows = assert_whole_rows(result.session_dir / "samples.csv", header.count(",") + 1)
    assert 100 < rows and (result.session_dir / "samples.csv").stat().st_size <= 150_000
    # STOP reached the device, and the run ended long before its 10 s
    kinds = [r.get("type") or r.get("message", {}).get("type") for r in read_rx_log(tmp_path / "rx.jsonl")]
    assert "STOP" in kinds
    assert result.summary["duration_s"] < 5.0


def test_cli_run_into_a_full_disk_exits_3_without_a_traceback(tmp_path, capsys, monkeypatch):
    from rigloop.cli import main
    from rigloop.engine import session

    original = session.SessionLifecycle._start_recording

    def failing(self, url):
        self.recorder_opener = samples_opener(60_000)
        original(self, url)

    monkeypatch.setattr(session.SessionLifecycle, "_start_recording", failing)
    out = tmp_path / "sessions"
    code = main(["run", str(DEMO_FAN), "--out", str(out), "--quiet", "--duration", "5",
                 "--set", "device.sim.clock=lockstep"])
    captured = capsys.readouterr()
    assert code == 3
    assert "Traceback" not in captured.err + captured.out
    assert "trip: recorder-failed" in captured.out


def test_full_before_start_is_refused_and_leaves_no_folder(tmp_path, capsys, monkeypatch):
    """The free-space estimate refuses before a folder is made (exit 2, the sizes named)."""
    from rigloop.cli import main
    from rigloop.engine import disk_budget

    monkeypatch.setattr(disk_budget, "free_bytes", lambda folder: 100_000)
    out = tmp_path / "sessions"
    code = main(["run", str(DEMO_FAN), "--out", str(out), "--quiet", "--set", "device.sim.clock=lockstep"])
    err = capsys.readouterr().err
    assert code == 2 and "Traceback" not in err
    assert "not enough disk space" in err and "rows x" in err and "0.1 MB free" in err
    assert not out.exists() or not any(out.iterdir())


def test_write_failure_at_start_removes_what_was_made(tmp_path, capsys, monkeypatch):
    """Space ran out between the estimate and the first write: exit 2, no 0-byte leftovers."""
    from rigloop.cli import main
    from rigloop.engine import session

    original = session.SessionLifecycle._start_recording

    def failing(self, url):
        self.recorder_opener = samples_opener(0)
        original(self, url)

    monkeypatch.setattr(session.SessionLifecycle, "_start_recording", failing)
    out = tmp_path / "sessions"
    code = main(["run", str(DEMO_FAN), "--out", str(out), "--quiet", "--set", "device.sim.clock=lockstep"])
    err = capsys.readouterr().err
    assert code == 2 and "Traceback" not in err and "ENOSPC" in err
    assert list(out.iterdir()) == []


def test_reserved_session_yaml_is_updated_in_place_when_no_new_file_fits(tmp_path, monkeypatch):
    from rigloop.engine import durable_files
    from rigloop.engine.durable_files import ReservedTextFile

    target = tmp_path / "session.yaml"
    meta = ReservedTextFile(target, "outcome: running\n")
    size = target.stat().st_size
    real_write_new = durable_files._write_new

    def no_space(path, data):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(durable_files, "_write_new", no_space)
    meta.update("outcome: tripped\ntrip: {cause: recorder-failed}\n")
    monkeypatch.setattr(durable_files, "_write_new", real_write_new)
    assert meta.in_place_updates == 1 and target.stat().st_size == size
    assert yaml.safe_load(target.read_text()) == {"outcome": "tripped", "trip": {"cause": "recorder-failed"}}
    assert [p.name for p in tmp_path.iterdir()] == ["session.yaml"]


def test_a_link_that_cannot_open_is_recorded_in_session_yaml(tmp_path, capsys):
    """A serial port that does not exist: exit 1, and the folder says why in session.yaml."""
    from rigloop.cli import main

    out = tmp_path / "sessions"
    code = main(["run", str(DEMO_FAN), "--out", str(out), "--quiet", "--set", "device.link=serial",
                 "--set", f"device.serial.port=/dev/rigloop-missing-{uuid.uuid4().hex[:8]}"])
    err = capsys.readouterr().err
    assert code == 1 and "Traceback" not in err
    folder = next(out.iterdir())
    meta = yaml.safe_load((folder / "session.yaml").read_text())
    assert meta["outcome"] == "stopped" and meta["stop_reason"].startswith("could not start")
    assert sorted(p.name for p in folder.iterdir()) == ["engine.log", "events.csv", "samples.csv",
                                                       "session.yaml"]


@pytest.fixture
def small_tmpfs(tmp_path):
    """A 4 MB tmpfs, or a skip where mounting is not permitted (needs root in a namespace)."""
    mount = shutil.which("mount")
    point = tmp_path / "mnt"
    point.mkdir()
    if mount is None or os.geteuid() != 0:
        pytest.skip("mounting a tmpfs needs root")
    done = subprocess.run([mount, "-t", "tmpfs", "-o", "size=4m", "tmpfs", str(point)],
                          capture_output=True, text=True)
    if done.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here: {done.stderr.strip()}")
    try:
        yield point
    finally:
        subprocess.run(["umount", "-l", str(point)], capture_output=True)


def test_real_full_disk_on_a_small_tmpfs(tmp_path, small_tmpfs, capsys):
    """The same on a real file system that fills up: a filler takes the rest of the space
    after 1 s of running, as another program on the same disk would."""
    from rigloop.engine.loop import Engine

    class Filler:
        critical = False
        done = False

        def on_tick(self, rec):
            if rec.t > 1.0 and not self.done:
                self.done = True
                with open(small_tmpfs / "filler.bin", "wb") as fh:
                    try:
                        while True:
                            fh.write(b"\0" * 65536)
                            fh.flush()
                    except OSError:
                        pass

        def on_event(self, ev):
            pass

        def poll(self, now):
            pass

    cfg = fan_config(tmp_path, f"recording.dir={small_tmpfs}")
    engine = Engine(cfg, duration_s=8.0)
    engine.add_subscriber(Filler())
    result = engine.run()
    assert result.exit_code == 3 and result.trip.cause == "recorder-failed"
    meta = yaml.safe_load((result.session_dir / "session.yaml").read_text())
    assert meta["outcome"] == "tripped" and meta["trip"]["cause"] == "recorder-failed"
    header = (result.session_dir / "samples.csv").read_text().splitlines()[0]
    assert assert_whole_rows(result.session_dir / "samples.csv", header.count(",") + 1) > 0
    err = capsys.readouterr().err            # engine.log could not be written either: quietly
    assert "Traceback" not in err and "Logging error" not in err


def test_a_write_started_by_a_full_buffer_counts_as_the_recorders_failure(tmp_path):
    """Rows arriving faster than the flush timer are written from on_tick: an error there is
    the recorder's failure too, and close() records it in session.yaml."""
    from rigloop.engine.durable_files import RowFile
    from rigloop.engine.recorder import SessionRecorder
    from rigloop.engine.records import TickRecord

    cfg = fan_config(tmp_path)
    folder = tmp_path / "session"
    folder.mkdir()
    headers = 600                               # both headers fit, the first rows do not
    rec = SessionRecorder(folder, cfg, device_url="test://", opener=samples_opener(headers))
    tick = TickRecord(0.5, 1, 1.0, 0.0, 1.0, 0.0, 2.0, 2.0, 0.1, "running", [1.0, 0.1, 2.0, 25.0], 33)
    with pytest.raises(OSError):
        for _ in range(RowFile.MAX_PENDING_ROWS):
            rec.on_tick(tick)
    assert rec.failure is not None and rec.failure.errno == errno.ENOSPC
    rec.close(outcome="tripped", stop_reason="disk full", trip={"cause": "recorder-failed"}, summary={})
    meta = yaml.safe_load((folder / "session.yaml").read_text())
    assert meta["outcome"] == "tripped" and "ENOSPC" in meta["recording_error"]
    assert (folder / "samples.csv").read_bytes().endswith(b"\n")


def test_an_internal_error_is_a_recorded_trip_not_a_traceback(tmp_path, capsys, monkeypatch):
    from rigloop.cli import main
    from rigloop.engine.loop import Engine

    def broken(self, now):
        raise RuntimeError("injected")

    monkeypatch.setattr(Engine, "_periodic", broken)
    out = tmp_path / "sessions"
    code = main(["run", str(DEMO_FAN), "--out", str(out), "--quiet", "--set", "device.sim.clock=lockstep"])
    err = capsys.readouterr().err
    assert code == 1 and "Traceback" not in err and "internal error (RuntimeError: injected)" in err
    folder = next(out.iterdir())
    meta = yaml.safe_load((folder / "session.yaml").read_text())
    assert meta["outcome"] == "tripped" and meta["trip"]["cause"] == "internal-error"
    assert "Traceback" in (folder / "engine.log").read_text()
