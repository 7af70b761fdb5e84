#!/usr/bin/env python3
"""Cost of authenticated frames (docs/protocol.md §14), each figure beside its plain counterpart
measured in the same run, judged as a ratio:

1. Per-frame cost in Python (the host): encode a COMMAND, decode a 4-channel SAMPLE, plain and
   tagged (truncated HMAC-SHA-256 through the standard ``hmac`` module).
2. Per-frame cost in C (the firmware stub, built here with -O2 for this machine): the same pair.
3. Loop ceiling: the engine against the lockstep simulated device at 2 kHz (as engine_bench.py
   item 1) with authentication off and on, alternated, best of two each.

Usage:  .venv/bin/python bench/auth_bench.py [--quick] [--json FILE]
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import timeit
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))


def progress(text: str) -> None:
    print(text, file=sys.stderr, flush=True)


def python_costs(n: int) -> dict:
    from rigloop.protocol.auth import DeviceAuth, HostAuth
    from rigloop.protocol.framing import decode_frame, encode_frame
    from rigloop.protocol.messages import Command, Hello, Sample

    key = bytes(range(32))
    host, device = HostAuth(key), DeviceAuth(key)
    device.start_session(host.host_nonce)
    hello = Hello(1, 1, 1, 4, 0, 500, 5000, 0.0, 0.0, 100.0, "bench", 100, 10**6, 1, device.device_nonce)
    decode_frame(encode_frame(hello, auth=device), host)
    cmd = Command(1, 1, 42.0)
    sample = Sample(7, 7000, 0x21, 40.0, 6, (1500.0, 0.6, 300.0, 31.0))
    plain_sample = encode_frame(sample)

    class Replayable:            # the same tagged frame every time: keep the replay check out of it
        def __init__(self, end):
            self.end = end

        def open(self, payload):
            self.end.rx_counter = 0
            return self.end.open(payload)

    tagged_sample = encode_frame(sample, auth=device)
    opener = Replayable(host)
    best = {}
    for name, fn in (
        ("encode_command_us", lambda: encode_frame(cmd)),
        ("encode_seal_command_us", lambda: encode_frame(cmd, auth=host)),
        ("decode_sample_us", lambda: decode_frame(plain_sample)),
        ("open_decode_sample_us", lambda: decode_frame(tagged_sample, opener)),
    ):
        best[name] = min(timeit.repeat(fn, number=n, repeat=5)) / n * 1e6
    return best


def c_costs(n: int, build: Path) -> dict | None:
    cc = shutil.which("cc") or shutil.which("gcc")
    if cc is None:
        progress("  no C compiler: C costs skipped")
        return None
    stub = ROOT / "firmware_stub"
    exe = build / "auth_cost"
    srcs = [str(HERE / "c" / "auth_cost.c")] + [str(stub / "src" / f) for f in
                                                ("rl_crc.c", "rl_proto.c", "rl_sha256.c", "rl_auth.c")]
    subprocess.run([cc, "-std=c99", "-O2", "-I", str(stub / "include"), *srcs, "-o", str(exe)], check=True)
    out = subprocess.run([str(exe), str(n)], capture_output=True, text=True, check=True).stdout
    return json.loads(out)


def ceiling(quick: bool, tmp: Path) -> dict:
    from engine_bench import CEILING_SETS, bench_engine

    key = tmp / "bench.key"
    key.write_text(os.urandom(32).hex() + "\n")
    key.chmod(0o600)
    seconds = 1.0 if quick else 4.0
    rates = {"off": [], "on": []}
    for attempt in range(2):
        for mode in ("off", "on"):
            sets = list(CEILING_SETS) + ([f"device.auth.key_file={key}"] if mode == "on" else [])
            progress(f"  loop ceiling, authentication {mode} ({attempt + 1}/2), {seconds:g} device s at 2 kHz")
            res = bench_engine(sets, seconds, tmp / f"s-{mode}-{attempt}")
            rates[mode].append(res["rate"])
    return {"off": max(rates["off"]), "on": max(rates["on"]), "all": rates}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--json", type=Path)
    args = parser.parse_args(argv)
    n_py = 5000 if args.quick else 50000
    with tempfile.TemporaryDirectory(prefix="rigloop-auth-bench-") as tmp_name:
        tmp = Path(tmp_name)
        progress("1/3 per-frame cost, Python")
        py = python_costs(n_py)
        progress("2/3 per-frame cost, C (-O2, this machine)")
        c = c_costs(20000 if args.quick else 400000, tmp)
        progress("3/3 loop ceiling, authentication off vs on")
        ceil = ceiling(args.quick, tmp)
    rows = [
        ("Python: encode COMMAND", py["encode_command_us"], py["encode_seal_command_us"], "us"),
        ("Python: decode SAMPLE (4 ch)", py["decode_sample_us"], py["open_decode_sample_us"], "us"),
    ]
    if c:
        rows += [
            ("C stub: encode COMMAND", c["encode_command_ns"], c["encode_seal_command_ns"], "ns"),
            ("C stub: decode SAMPLE (4 ch)", c["decode_sample_ns"], c["open_decode_sample_ns"], "ns"),
        ]
    print(f"{'item':<34} {'plain':>10} {'tagged':>10} {'unit':>4} {'tagged/plain':>13}")
    for name, plain, tagged, unit in rows:
        print(f"{name:<34} {plain:>10.2f} {tagged:>10.2f} {unit:>4} {tagged / plain:>13.2f}")
    print(f"{'loop ceiling (samples/s)':<34} {ceil['off']:>10.0f} {ceil['on']:>10.0f} {'':>4} "
          f"{ceil['on'] / ceil['off']:>13.2f}")
    if args.json:
        args.json.write_text(json.dumps({"python": py, "c": c, "ceiling": ceil}, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
