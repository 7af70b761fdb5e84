"""The pre-shared key of a rig (docs/protocol.md §14): a hex key in a file only its owner reads.

Used by the host (``device.auth.key_file``) and the simulated device (``rigloop sim --key-file``);
the C host port reads the same format. A key file that group or others may read is refused: the
key is the only thing that tells the rig's host from any other sender on the network.
"""

from __future__ import annotations

import os
import stat
from pathlib import Path

from rigloop.protocol.auth import KEY_MAX, KEY_MIN


class KeyFileError(Exception):
    """The key file cannot be used; the message names the file and the fix."""


def load_key(path: str | os.PathLike) -> bytes:
    """Read a key: hex digits (32..128 of them, i.e. 16..64 bytes), whitespace ignored.

    Refuses a file that group or others can read (POSIX), with the ``chmod`` that fixes it.
    """
    p = Path(path)
    try:
        info = p.stat()
    except FileNotFoundError:
        raise KeyFileError(f"key file {p}: not found; create it with e.g. "
                           f"`python -c \"import secrets; print(secrets.token_hex(32))\" > {p}` "
                           f"then `chmod 600 {p}`") from None
    except OSError as exc:
        raise KeyFileError(f"key file {p}: cannot read it ({exc.strerror or exc})") from None
    if not stat.S_ISREG(info.st_mode):
        raise KeyFileError(f"key file {p}: not a regular file")
    if os.name == "posix" and info.st_mode & (stat.S_IRWXG | stat.S_IRWXO):
        raise KeyFileError(f"key file {p}: group or others may read it (mode {stat.S_IMODE(info.st_mode):03o}); "
                           f"make it private with `chmod 600 {p}`")
    try:
        text = p.read_text(encoding="ascii")
    except (OSError, UnicodeDecodeError) as exc:
        raise KeyFileError(f"key file {p}: cannot read it as text ({exc})") from None
    digits = "".join(text.split())
    try:
        key = bytes.fromhex(digits)
    except ValueError:
        raise KeyFileError(f"key file {p}: expected hex digits only (0-9, a-f), e.g. the output "
                           "of `python -c \"import secrets; print(secrets.token_hex(32))\"`") from None
    if not KEY_MIN <= len(key) <= KEY_MAX:
        raise KeyFileError(f"key file {p}: the key is {len(key)} bytes; give {KEY_MIN}..{KEY_MAX} bytes "
                           f"({2 * KEY_MIN}..{2 * KEY_MAX} hex digits; 32 bytes is usual)")
    return key
