"""Host side of the UDP transport: one frame per datagram, no COBS.

The socket binds only ``(local_host, local_port)`` — loopback by default, so a run never listens
on a network it was not told to — and accepts datagrams only from the exact device address
(host and port); anything else is counted as ``foreign`` and dropped. The socket is connected to
nothing, so that foreign datagrams can be seen and counted instead of silently filtered by the OS.
"""

from __future__ import annotations

import errno
import ipaddress
import platform
import select
import socket
import struct
import sys
import time

from rigloop.link.base import LinkCounters, LinkError, SampleFilter
from rigloop.protocol.auth import HostAuth
from rigloop.protocol.framing import DatagramDecoder, encode_frame
from rigloop.protocol.messages import Message, ProtocolError

_RCVBUF = 1 << 20
_MAX_DATAGRAM = 2048
_SEND_WAIT_S = 0.05
_MAX_DRAIN = 1024  # datagrams read per recv() call at most


def _resolve(host: str, port: int, family: int, what: str) -> tuple:
    try:
        infos = socket.getaddrinfo(host, port, family, socket.SOCK_DGRAM)
    except (socket.gaierror, UnicodeError) as exc:
        raise LinkError(f"{what} {host!r}: cannot resolve ({exc}); give an IP address or a known host name") from None
    if not infos:
        raise LinkError(f"{what} {host!r}: no address found")
    if family == socket.AF_UNSPEC:
        infos.sort(key=lambda info: info[0] != socket.AF_INET)  # prefer IPv4
    return infos[0][0], infos[0][4]


def _is_loopback(address: str) -> bool:
    return ipaddress.ip_address(address.split("%", 1)[0]).is_loopback


_ANC_SIZE = 64
# Python does not export these on every version; the values are Linux's generic ones
# (include/uapi/asm-generic/socket.h), valid on x86, ARM and RISC-V.
_SO_TIMESTAMPNS = getattr(socket, "SO_TIMESTAMPNS", 35 if sys.platform.startswith("linux")
                          and platform.machine() in ("x86_64", "i686", "aarch64", "armv7l", "armv6l", "riscv64")
                          else None)


def _enable_kernel_timestamps(sock: socket.socket) -> bool:
    """Ask the kernel to stamp each datagram on arrival (Linux: SO_TIMESTAMPNS). Elsewhere the
    engine falls back to timing from the moment it reads the datagram."""
    opt = _SO_TIMESTAMPNS
    if opt is None or not hasattr(sock, "recvmsg"):
        return False
    try:
        sock.setsockopt(socket.SOL_SOCKET, opt, 1)
        return True
    except OSError:
        return False


def _kernel_time(ancdata) -> float:
    for level, kind, data in ancdata:
        if level == socket.SOL_SOCKET and kind == _SO_TIMESTAMPNS and len(data) >= 16:
            sec, nsec = struct.unpack_from("qq", data)
            return sec + nsec * 1e-9
    return 0.0


class UdpLink:
    """Host end of a UDP device link."""

    def __init__(self, device_host: str, device_port: int, local_host: str = "127.0.0.1", local_port: int = 0,
                 *, key: bytes | None = None):
        for field, value in (("device_port", device_port), ("local_port", local_port)):
            if not isinstance(value, int) or isinstance(value, bool) or not 0 <= value <= 65535:
                raise LinkError(f"udp {field}={value!r}: give an integer port in 0..65535")
        if device_port == 0:
            raise LinkError("udp device_port=0: give the port the device listens on (1..65535)")
        family, device_addr = _resolve(device_host, device_port, socket.AF_UNSPEC, "udp device host")
        if family == socket.AF_INET6 and local_host == "127.0.0.1":
            local_host = "::1"  # the same "loopback only" default, in the device's address family
        _, local_addr = _resolve(local_host, local_port, family, "udp local_host")
        if not _is_loopback(device_addr[0]) and _is_loopback(local_addr[0]):
            raise LinkError(
                f"udp device {device_addr[0]} is not on this machine but local_host is {local_addr[0]} "
                "(loopback): set device.udp.local_host to the address of the network interface that "
                "faces the device"
            )
        self._device = (device_addr[0], device_addr[1])
        sock = socket.socket(family, socket.SOCK_DGRAM)
        try:
            sock.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, _RCVBUF)
            self._kernel_stamps = _enable_kernel_timestamps(sock)
            sock.bind(local_addr)
            sock.setblocking(False)
        except OSError as exc:
            sock.close()
            raise LinkError(
                f"udp: cannot bind local address {local_addr[0]} port {local_addr[1]} ({exc.strerror or exc}); "
                "choose a free local_port (0 picks one) or another local_host"
            ) from None
        self._sock = sock
        self._dev_sockaddr = device_addr
        self.counters = LinkCounters()
        #: the authentication end (docs/protocol.md §14); without a key it refuses tagged frames
        self.auth = HostAuth(key)
        self._decoder = DatagramDecoder(self.counters.rejected, auth=self.auth)
        self._filter = SampleFilter(self.counters)
        host = f"[{device_addr[0]}]" if family == socket.AF_INET6 else device_addr[0]
        self.url = f"udp://{host}:{device_addr[1]}"
        self._closed = False
        #: kernel receive times (time.time() clock) of the messages the last recv() returned, in
        #: the same order; empty where the OS gives none. The engine measures latency from them.
        self.last_rx_times: list[float] = []

    @property
    def local_address(self) -> tuple[str, int]:
        """(host, port) this link receives on — the port is the real one when 0 was asked."""
        addr = self._sock.getsockname()
        return addr[0], addr[1]

    @property
    def device_address(self) -> tuple[str, int]:
        return self._device

    def send(self, msg: Message) -> None:
        if self._closed:
            raise LinkError(f"{self.url}: link is closed")
        try:
            frame = encode_frame(msg, auth=self.auth)
        except ProtocolError as exc:
            raise LinkError(f"{self.url}: refusing to send {type(msg).__name__}: {exc}") from None
        try:
            self._sock.sendto(frame, self._dev_sockaddr)
        except BlockingIOError:
            # Send buffer full: wait a little for room, once, then give up loudly.
            _, writable, _ = select.select([], [self._sock], [], _SEND_WAIT_S)
            if not writable:
                raise LinkError(f"{self.url}: send buffer stayed full for {_SEND_WAIT_S * 1000:.0f} ms") from None
            self._send_once(frame)
        except (ConnectionRefusedError, ConnectionResetError):
            self.counters.unreachable += 1  # an earlier datagram bounced; this one may still arrive
            self._send_once(frame)
        except OSError as exc:
            raise LinkError(f"{self.url}: send failed ({exc.strerror or exc})") from None
        self.counters.tx_frames += 1
        self.counters.tx_bytes += len(frame)

    def _send_once(self, frame: bytes) -> None:
        try:
            self._sock.sendto(frame, self._dev_sockaddr)
        except OSError as exc:
            raise LinkError(f"{self.url}: send failed ({exc.strerror or exc})") from None

    def recv(self, timeout: float | None) -> list[Message]:
        if self._closed:
            raise LinkError(f"{self.url}: link is closed")
        out = self._drain()
        if out or timeout == 0:
            return out
        deadline = None if timeout is None else time.monotonic() + timeout
        while not out:
            remaining = None if deadline is None else deadline - time.monotonic()
            if remaining is not None and remaining <= 0:
                break
            try:
                readable, _, _ = select.select([self._sock], [], [], remaining)
            except (OSError, ValueError) as exc:
                raise LinkError(f"{self.url}: wait failed ({exc})") from None
            if readable:
                out = self._drain()
        return out

    def _drain(self) -> list[Message]:
        out: list[Message] = []
        times: list[float] = []
        self.last_rx_times = times
        sock = self._sock
        device = self._device
        counters = self.counters
        decode = self._decoder.decode
        keep = self._filter.keep
        stamps = self._kernel_stamps
        stamp = 0.0
        for _ in range(_MAX_DRAIN):  # bounded, so a flood cannot hold the loop here
            try:
                if stamps:
                    data, anc, _flags, addr = sock.recvmsg(_MAX_DATAGRAM, _ANC_SIZE)
                    stamp = _kernel_time(anc)
                else:
                    data, addr = sock.recvfrom(_MAX_DATAGRAM)
            except (BlockingIOError, InterruptedError):
                return out
            except (ConnectionRefusedError, ConnectionResetError):
                counters.unreachable += 1
                continue
            except OSError as exc:
                if exc.errno in (errno.EAGAIN, errno.EWOULDBLOCK):
                    return out
                raise LinkError(f"{self.url}: receive failed ({exc.strerror or exc})") from None
            counters.rx_bytes += len(data)
            if addr[0] != device[0] or addr[1] != device[1]:
                counters.foreign += 1
                continue
            msg = decode(data)
            if msg is not None and keep(msg):
                counters.rx_frames += 1
                out.append(msg)
                if stamps:
                    times.append(stamp)
        return out

    def fileno(self) -> int | None:
        return None if self._closed else self._sock.fileno()

    def close(self) -> None:
        if not self._closed:
            self._closed = True
            self._sock.close()

    def __enter__(self) -> UdpLink:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"UdpLink({self.url!r})"
