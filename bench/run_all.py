"""Run every benchmark against the performance targets (bench/README.md); print one table.

Runs ``engine_bench.py`` and ``recorder_bench.py`` (and ``gui_bench.py`` when it exists, unless
``--no-gui``), each in its own process, one after the other, so that no two benchmarks compete
for the two cores. Each script's own output is shown as it finishes; the combined table of
measured value, bare reference, ratio, target and PASS/MISS comes last.

Run:  .venv/bin/python bench/run_all.py [--quick] [--no-gui] [--long] [--markdown]
Never run by the tests.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
from engine_bench import Row, format_table  # noqa: E402


def _options_of(script: Path) -> str:
    """The script's --help text ('' if it has none), to pass only options it understands."""
    try:
        out = subprocess.run([sys.executable, str(script), "--help"], capture_output=True, text=True,
                             timeout=120, env=_env())
        return out.stdout
    except (OSError, subprocess.SubprocessError):
        return ""


def _env() -> dict:
    env = dict(os.environ)
    env.setdefault("QT_QPA_PLATFORM", "offscreen")
    return env


def run_script(script: Path, args: list[str], json_path: Path | None) -> tuple[int, str, list[Row]]:
    cmd = [sys.executable, str(script), *args] + (["--json", str(json_path)] if json_path else [])
    print(f"== {script.name} {' '.join(args)}", file=sys.stderr, flush=True)
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, stdout=subprocess.PIPE, text=True, env=_env())   # stderr: live progress
    print(f"== {script.name} finished in {time.perf_counter() - t0:.0f} s (exit {proc.returncode})",
          file=sys.stderr, flush=True)
    rows: list[Row] = []
    if json_path is not None and json_path.exists():
        data = json.loads(json_path.read_text(encoding="utf-8"))
        for r in data.get("rows", []):
            rows.append(Row(r["measure"], r["value"], r["reference"], r["ratio"], r["target"]))
    return proc.returncode, proc.stdout, rows


_GUI_LINE = re.compile(r"^(.{40}) (.{22}) (.{24}) +(\S+)  ?(.*)$")
_TARGET = re.compile(r"^(>=|<=|<)\s*([0-9.]+)$")


def parse_fixed_table(text: str) -> list[Row]:
    """Rows of gui_bench.py's fixed-width table (measure, value, target, ratio, want); [] if the
    layout is not recognised. Used only for a script that cannot write --json."""
    rows: list[Row] = []
    lines = text.splitlines()
    try:
        start = next(i for i, line in enumerate(lines) if line.startswith("measure"))
    except StopIteration:
        return []
    for line in lines[start + 1:]:
        m = _GUI_LINE.match(line)
        if not m:
            break
        name, value, target_text, ratio_text, want = (g.strip() for g in m.groups())
        try:
            ratio = float(ratio_text)
        except ValueError:
            return []
        t = _TARGET.match(want)
        rows.append(Row(f"6 {name}", value, target_text if t else " ".join(x for x in (target_text, want) if x),
                        ratio, f"{t.group(1)} {t.group(2)}" if t else ""))
    return rows


def markdown_table(rows: list[Row]) -> str:
    out = ["| measure | measured | bare reference (same run) | ratio | target | |",
           "|---|---|---|---:|---|---|"]
    for r in rows:
        ratio = "-" if r.ratio is None else f"{r.ratio:.3g}"
        out.append(f"| {r.measure.strip()} | {r.value} | {r.reference} | {ratio} | {r.target or '-'} | {r.verdict} |")
    return "\n".join(out)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description="run all rigloop benchmarks, print one table")
    parser.add_argument("--quick", action="store_true", help="short runs that check the scripts work")
    parser.add_argument("--long", action="store_true", help="recorder over 1e7 rows instead of 1e6")
    parser.add_argument("--no-gui", action="store_true", help="skip gui_bench.py")
    parser.add_argument("--markdown", action="store_true", help="also print the table as Markdown")
    args = parser.parse_args(argv)
    size = ["--quick"] if args.quick else []
    plan = [(HERE / "engine_bench.py", size, True),
            (HERE / "recorder_bench.py", ["--long"] if args.long and not args.quick else size, True)]
    gui = HERE / "gui_bench.py"
    if gui.exists() and not args.no_gui:
        opts = _options_of(gui)
        gui_args = []
        if args.quick:
            if "--quick" in opts:
                gui_args = ["--quick"]
            else:
                gui_args = (["--seconds", "2"] if "--seconds" in opts else []) + \
                           (["--frames", "20"] if "--frames" in opts else [])
        plan.append((gui, gui_args, "--json" in opts))
    all_rows: list[Row] = []
    texts: list[tuple[str, str]] = []
    failed = []
    t0 = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="rigloop-bench-") as tmp:
        for script, script_args, has_json in plan:
            json_path = Path(tmp) / f"{script.stem}.json" if has_json else None
            code, text, rows = run_script(script, script_args, json_path)
            print(text, flush=True)
            texts.append((script.name, text))
            if code != 0:
                failed.append(f"{script.name} (exit {code})")
            if not rows and not has_json and code == 0:
                rows = parse_fixed_table(text)
            if rows:
                all_rows += rows
            elif code == 0 and not has_json:
                all_rows.append(Row(f"{script.stem}: see its own table above", "", "", None, ""))
    verdicts = [r.verdict for r in all_rows]
    print(f"rigloop benchmarks, combined ({'quick' if args.quick else 'full'} run, "
          f"{time.perf_counter() - t0:.0f} s, {time.strftime('%Y-%m-%d %H:%M')}, {os.cpu_count()} cores)")
    print(format_table(all_rows))
    print(f"PASS {verdicts.count('PASS')}, MISS {verdicts.count('MISS')}"
          + (f"; failed: {', '.join(failed)}" if failed else ""))
    if args.markdown:
        print()
        print(markdown_table(all_rows))
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
