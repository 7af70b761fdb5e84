"""Host side of the serial transport (USB CDC or UART): COBS frames delimited by 0x00.

Opening: ``serial.serial_for_url`` (so pyserial URLs such as ``loop://`` work in tests), raw
8N1, with exclusive access on POSIX (an advisory ``flock``; Windows ports are exclusive by
nature and pyserial refuses the flag there). The input buffer is flushed, then a single 0x00 is
sent so the device's decoder starts at a frame boundary.

Waiting for data, by platform — what was tried where:
- POSIX (tested on Linux with pseudo-terminals): ``select()`` on the port's file descriptor with
  the caller's timeout, then ``os.read`` of what is there. This lets the engine wait on the link
  with its own deadline and exposes ``fileno()`` for a select loop.
- Ports without a file descriptor (Windows; pyserial's ``loop://``, tested here): pyserial's own
  read timeout — ``read(1)`` blocking up to the timeout, then ``read(in_waiting)``. ``fileno()`` is
  None. Windows itself has not been tried in this tree.

Writing goes through pyserial with a short write timeout and a lock, so a STOP sent from another
thread never interleaves its bytes with a COMMAND.
"""

from __future__ import annotations

import errno
import io
import os
import select
import threading
import time

import serial

from rigloop.link.base import LinkCounters, LinkError, SampleFilter
from rigloop.protocol.auth import HostAuth
from rigloop.protocol.framing import StreamDecoder, encode_serial
from rigloop.protocol.messages import Message, ProtocolError

_WRITE_TIMEOUT_S = 0.1
_READ_CHUNK = 4096
_READ_MAX = 16 * _READ_CHUNK  # bytes read per recv() call at most


class SerialLink:
    """Host end of a serial device link."""

    def __init__(self, port: str, baud: int, *, key: bytes | None = None):
        if not isinstance(port, str) or not port:
            raise LinkError(f"serial port {port!r}: give a device path such as /dev/ttyACM0 or COM3")
        if not isinstance(baud, int) or isinstance(baud, bool) or baud <= 0:
            raise LinkError(f"serial baud={baud!r}: give a positive integer such as 115200 or 921600")
        options = {"baudrate": baud, "timeout": 0, "write_timeout": _WRITE_TIMEOUT_S}
        if os.name == "posix" and "://" not in port:
            options["exclusive"] = True
        try:
            ser = serial.serial_for_url(port, **options)
        except (serial.SerialException, OSError, ValueError) as exc:
            raise LinkError(
                f"serial port {port}: cannot open ({exc}); check the path (`rigloop ports` lists them), "
                "that no other program holds the port, and your permission to use it"
            ) from None
        self._ser = ser
        self._fd = _fileno_of(ser)
        self.url = f"serial://{port}?baud={baud}"
        self.counters = LinkCounters()
        #: the authentication end (docs/protocol.md §14); without a key it refuses tagged frames
        self.auth = HostAuth(key)
        self._decoder = StreamDecoder(self.counters.rejected, auth=self.auth)
        self._filter = SampleFilter(self.counters)
        self._write_lock = threading.Lock()
        self._closed = False
        try:
            ser.reset_input_buffer()
            self._write(b"\x00")
        except LinkError:
            self.close()
            raise
        except (serial.SerialException, OSError) as exc:
            self.close()
            raise LinkError(f"serial port {port}: cannot prepare the port ({exc})") from None

    def send(self, msg: Message) -> None:
        if self._closed:
            raise LinkError(f"{self.url}: link is closed")
        try:
            data = encode_serial(msg, auth=self.auth)
        except ProtocolError as exc:
            raise LinkError(f"{self.url}: refusing to send {type(msg).__name__}: {exc}") from None
        self._write(data)
        self.counters.tx_frames += 1

    def _write(self, data: bytes) -> None:
        with self._write_lock:
            try:
                self._ser.write(data)
            except serial.SerialTimeoutException:
                raise LinkError(
                    f"{self.url}: write did not finish within {_WRITE_TIMEOUT_S * 1000:.0f} ms "
                    "(device not reading, or the baud rate is too low for the loop rate)"
                ) from None
            except (serial.SerialException, OSError) as exc:
                raise LinkError(f"{self.url}: write failed ({exc}); the device may be unplugged") from None
        self.counters.tx_bytes += len(data)

    def recv(self, timeout: float | None) -> list[Message]:
        if self._closed:
            raise LinkError(f"{self.url}: link is closed")
        read = self._read_posix if self._fd is not None else self._read_pyserial
        out = self._ingest(read(0.0))
        if out or timeout == 0:
            return out
        deadline = None if timeout is None else time.monotonic() + timeout
        while not out:
            remaining = None if deadline is None else deadline - time.monotonic()
            if remaining is not None and remaining <= 0:
                break
            out = self._ingest(read(remaining))
        return out

    def _ingest(self, data: bytes) -> list[Message]:
        if not data:
            return []
        self.counters.rx_bytes += len(data)
        keep = self._filter.keep
        out = [m for m in self._decoder.feed(data) if keep(m)]
        self.counters.rx_frames += len(out)
        return out

    def _read_posix(self, timeout: float | None) -> bytes:
        fd = self._fd
        try:
            # Always select first: with VMIN = VTIME = 0 a read of an idle port returns b"" too, so
            # only "readable but nothing to read" means the other side is gone.
            if not select.select([fd], [], [], timeout)[0]:
                return b""
            data = os.read(fd, _READ_CHUNK)
            if not data:
                raise LinkError(f"{self.url}: port closed by the other side (end of file); the device may be unplugged")
            # A full chunk means more may be waiting: take it now, up to a bound.
            while len(data) % _READ_CHUNK == 0 and len(data) < _READ_MAX and select.select([fd], [], [], 0)[0]:
                more = os.read(fd, _READ_CHUNK)
                if not more:
                    break
                data += more
            return data
        except (BlockingIOError, InterruptedError):
            return b""
        except OSError as exc:
            if exc.errno in (errno.EAGAIN, errno.EWOULDBLOCK):
                return b""
            raise LinkError(f"{self.url}: read failed ({exc.strerror or exc}); the device may be unplugged") from None

    def _read_pyserial(self, timeout: float | None) -> bytes:
        ser = self._ser
        try:
            ser.timeout = timeout
            first = ser.read(1)
            if not first:
                return b""
            ser.timeout = 0
            waiting = ser.in_waiting
            return first + (ser.read(waiting) if waiting else b"")
        except (serial.SerialException, OSError) as exc:
            raise LinkError(f"{self.url}: read failed ({exc}); the device may be unplugged") from None

    def fileno(self) -> int | None:
        return None if self._closed else self._fd

    def close(self) -> None:
        if not self._closed:
            self._closed = True
            try:
                self._ser.close()
            except (serial.SerialException, OSError):
                pass  # closing a vanished port: nothing left to release

    def __enter__(self) -> SerialLink:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"SerialLink({self.url!r})"


def _fileno_of(ser) -> int | None:
    try:
        return ser.fileno()
    except (AttributeError, io.UnsupportedOperation, OSError, serial.SerialException):
        return None
