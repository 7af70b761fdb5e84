"""Transports between the host and a device: UDP datagrams and serial (COBS) streams."""

from __future__ import annotations

from rigloop.link.base import Link, LinkCounters, LinkError
from rigloop.link.serial_link import SerialLink
from rigloop.link.udp import UdpLink
from rigloop.link.url import DEFAULT_BAUD, open_link, open_url

__all__ = ["DEFAULT_BAUD", "Link", "LinkCounters", "LinkError", "SerialLink", "UdpLink", "open_link", "open_url"]
