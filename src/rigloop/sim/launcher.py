"""Start the simulated device as a child process for the engine (``device.link: sim``).

The child is ``python -m rigloop sim --udp 127.0.0.1:0 ...`` with the config's
``device.sim.*`` settings, the configured channels (with their raw scaling) and rate, and
``--quit-with-parent``, so it never outlives an engine that crashed. It announces its address
with one ``rigloop-sim listening udp://HOST:PORT`` line on stdout; its stderr goes to a
temporary file that is quoted when it fails to start.
"""

from __future__ import annotations

import json
import os
import queue
import subprocess
import sys
import tempfile
import threading
from pathlib import Path
from typing import IO, Any, Sequence

from rigloop.sim.server import LISTENING_PREFIX

#: How long to wait for the child's ``listening`` line (it imports numpy and the plants first).
START_TIMEOUT_S = 20.0
#: How long ``stop`` waits after SIGTERM before it kills the child.
STOP_TIMEOUT_S = 5.0


class SimStartError(RuntimeError):
    """The simulated device did not start; the message quotes its error output."""


def sim_arguments(cfg: Any, *, rx_log: str | os.PathLike | None = None,
                  trace: str | os.PathLike | None = None, quit_after: float | None = None,
                  extra_faults: Sequence[str] = ()) -> list[str]:
    """Arguments after ``rigloop sim`` for a :class:`rigloop.config.Config` (see module doc)."""
    sim = cfg.device.sim
    args = ["--udp", "127.0.0.1:0", "--plant", str(sim.plant), "--clock", str(sim.clock),
            "--rate", repr(float(cfg.device.rate_hz)), "--noise", repr(float(sim.noise)),
            "--seed", str(int(sim.seed)), "--quit-with-parent"]
    limits = getattr(cfg, "limits", None)
    if sim.clock == "lockstep" and limits is not None:
        # Wait for the host's answer up to a third of its stale-data limit, capped at 20 ms and
        # at least one period: a briefly descheduled host then keeps lockstep exact, and a lost
        # frame costs little wall time.
        period_ms = 1000.0 / cfg.device.rate_hz
        stale_ms = period_ms * limits.stale_periods
        args += ["--lockstep-wait-ms", repr(max(period_ms, min(stale_ms / 3, 20.0)))]
    if sim.params_file is not None:
        path = Path(sim.params_file)
        if not path.is_absolute():
            path = Path(cfg.base_dir) / path
        args += ["--params", str(path)]
    for key, value in (sim.params or {}).items():
        args += ["--param", f"{key}={json.dumps(value)}"]     # JSON is valid YAML
    if getattr(sim, "rig", None):
        args += ["--rig", json.dumps(sim.rig)]          # JSON is valid YAML
    if getattr(sim, "sensors", None):
        args += ["--sensors", json.dumps(sim.sensors)]
    args += ["--channels", ",".join(c.name for c in cfg.channels)]
    for c in cfg.channels:
        if float(c.scale) != 1.0:
            args += ["--scale", f"{c.name}={float(c.scale)!r}"]
        if float(c.offset) != 0.0:
            args += ["--offset", f"{c.name}={float(c.offset)!r}"]
    for spec in (*sim.faults, *extra_faults):
        args += ["--fault", str(spec)]
    key_file = getattr(cfg.device, "key_file", None)
    if key_file is not None:
        args += ["--key-file", str(key_file)]      # the simulated rig holds the same key as its host
    if rx_log is not None:
        args += ["--rx-log", str(rx_log)]
    if trace is not None:
        args += ["--trace", str(trace)]
    if quit_after is not None:
        args += ["--quit-after", repr(float(quit_after))]
    return args


class SimProcess:
    """A running ``rigloop sim`` child. Use as a context manager, or call :meth:`stop`."""

    def __init__(self, args: Sequence[str], *, timeout_s: float = START_TIMEOUT_S):
        self.args = [sys.executable, "-m", "rigloop", "sim", *args]
        self._stderr: IO[bytes] = tempfile.TemporaryFile()
        env = dict(os.environ)
        src = str(Path(__file__).resolve().parents[2])     # the folder holding `rigloop`
        env["PYTHONPATH"] = src + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
        try:
            self.proc = subprocess.Popen(self.args, stdin=subprocess.DEVNULL,
                                         stdout=subprocess.PIPE, stderr=self._stderr, env=env,
                                         text=True, encoding="utf-8")
        except OSError as exc:
            self._stderr.close()
            raise SimStartError(f"cannot start the simulated device ({exc}); "
                                f"command: {' '.join(self.args)}") from None
        self.url = ""
        self.host = ""
        self.port = 0
        self._reader: threading.Thread | None = None
        self._stderr_final: str | None = None
        try:
            line = self._read_line(timeout_s)
            self._parse(line)
        except BaseException:
            self.stop()
            raise

    def _read_line(self, timeout_s: float) -> str:
        lines: queue.Queue[str] = queue.Queue()
        stdout = self.proc.stdout
        assert stdout is not None
        reader = threading.Thread(target=lambda: lines.put(stdout.readline()),
                                  name="rigloop-sim-start", daemon=True)
        reader.start()
        self._reader = reader
        try:
            return lines.get(timeout=timeout_s)
        except queue.Empty:
            raise SimStartError(self._failure(f"did not report its address within {timeout_s:g} s"))

    def _parse(self, line: str) -> None:
        if not line.startswith(LISTENING_PREFIX):
            self.proc.poll()
            raise SimStartError(self._failure("exited before it was ready" if not line
                                              else f"printed {line.strip()!r} instead of its address"))
        self.url = line[len(LISTENING_PREFIX):].strip()
        if not self.url.startswith("udp://"):
            raise SimStartError(self._failure(f"listens on {self.url!r}, not on UDP"))
        hostport = self.url[len("udp://"):]
        host, _, port = hostport.rpartition(":")
        self.host = host.strip("[]")
        self.port = int(port)

    def _failure(self, what: str) -> str:
        try:
            self.proc.wait(timeout=1.0)
        except subprocess.TimeoutExpired:
            pass
        text = self.stderr_text().strip()
        code = self.proc.returncode
        status = f" (exit status {code})" if code is not None else ""
        detail = f":\n{text}" if text else "; it printed nothing on stderr"
        return f"the simulated device {what}{status}{detail}\ncommand: {' '.join(self.args)}"

    def stderr_text(self) -> str:
        """Everything the child wrote on stderr so far (all of it once stopped)."""
        if self._stderr_final is not None:
            return self._stderr_final
        try:
            self._stderr.flush()
            self._stderr.seek(0)
            return self._stderr.read().decode("utf-8", "replace")
        except (OSError, ValueError):
            return ""

    @property
    def running(self) -> bool:
        return self.proc.poll() is None

    def stop(self, timeout_s: float = STOP_TIMEOUT_S) -> int | None:
        """SIGTERM, wait up to ``timeout_s``, then kill; release the pipes. Idempotent.

        Returns the exit status (0 for a clean exit on SIGTERM). The child's stderr stays
        readable through :meth:`stderr_text`.
        """
        proc = self.proc
        if proc.poll() is None:
            proc.terminate()
            try:
                proc.wait(timeout=timeout_s)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait()
        if self._reader is not None:
            self._reader.join(timeout=1.0)     # it ends at the child's end of file
        if proc.stdout is not None and not proc.stdout.closed:
            proc.stdout.close()
        if self._stderr_final is None:
            self._stderr_final = self.stderr_text()
            self._stderr.close()
        return proc.returncode

    close = stop

    def __enter__(self) -> SimProcess:
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()

    def __repr__(self) -> str:
        return f"SimProcess({self.url or 'starting'}, pid {self.proc.pid})"


def start_sim(cfg: Any, *, rx_log: str | os.PathLike | None = None,
              trace: str | os.PathLike | None = None, quit_after: float | None = None,
              extra_faults: Sequence[str] = (), timeout_s: float = START_TIMEOUT_S) -> SimProcess:
    """Start ``rigloop sim`` for ``cfg`` and wait until it listens; raise SimStartError if not."""
    return SimProcess(sim_arguments(cfg, rx_log=rx_log, trace=trace, quit_after=quit_after,
                                    extra_faults=extra_faults), timeout_s=timeout_s)
