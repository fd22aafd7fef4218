"""Run the benchmarks and print one table: time, peak memory and target per case.

Every ``tools/bench_*.py`` module exposes ``cases()``, a list of dicts with

- ``name``: short label of the case;
- ``target``: the target in words (e.g. ``"< 1 s"``);
- ``seconds``: time limit in seconds, or None when only reported;
- ``memory_mb``: peak-memory limit in MiB, or None;
- ``run``: a callable doing the work; it may return nothing, a short note
  (str), or ``(note, met)`` where ``met`` (bool) says whether targets the
  case checks itself (e.g. time ratios) were met; ``met = False`` makes the
  verdict MISSED.

Each case runs in a fresh Python process so its peak resident memory is
its own. Run as ``python tools/bench.py [substring ...]`` to pick cases.
"""
from __future__ import annotations

import importlib
import json
import resource
import subprocess
import sys
import time
from pathlib import Path

TOOLS = Path(__file__).resolve().parent


def _modules() -> list[str]:
    return sorted(p.stem for p in TOOLS.glob("bench_*.py"))


def _run_one(module_name: str, case_name: str) -> None:
    sys.path.insert(0, str(TOOLS))
    case = next(c for c in importlib.import_module(module_name).cases() if c["name"] == case_name)
    start = time.perf_counter()
    outcome = case["run"]()
    seconds = time.perf_counter() - start
    note, met = outcome if isinstance(outcome, tuple) else (outcome, True)
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print(json.dumps({"seconds": seconds, "peak_mb": peak_mb, "note": note or "", "met": bool(met)}))


def _verdict(case: dict, result: dict) -> str:
    missed = []
    if case.get("seconds") is not None and result["seconds"] > case["seconds"]:
        missed.append("time")
    if case.get("memory_mb") is not None and result["peak_mb"] > case["memory_mb"]:
        missed.append("memory")
    if not result["met"]:
        missed.append("case check")
    return "MISSED " + "+".join(missed) if missed else "met"


def main(selection: list[str]) -> int:
    sys.path.insert(0, str(TOOLS))
    rows = []
    for module_name in _modules():
        for case in importlib.import_module(module_name).cases():
            if selection and not any(s in case["name"] for s in selection):
                continue
            print(f"running: {case['name']} ...", file=sys.stderr, flush=True)
            done = subprocess.run(
                [sys.executable, __file__, "--one", module_name, case["name"]],
                capture_output=True, text=True,
            )
            if done.returncode != 0:
                rows.append((case["name"], "-", "-", case["target"], "FAILED", done.stderr.strip()[-200:]))
                continue
            result = json.loads(done.stdout.strip().splitlines()[-1])
            rows.append((case["name"], f"{result['seconds']:.2f} s", f"{result['peak_mb']:.0f} MiB",
                         case["target"], _verdict(case, result), result["note"]))
    header = ("case", "time", "peak memory", "target", "verdict", "note")
    widths = [max(len(str(r[i])) for r in rows + [header]) for i in range(len(header))]
    for row in [header, tuple("-" * w for w in widths)] + rows:
        print(" | ".join(str(cell).ljust(w) for cell, w in zip(row, widths)))
    return 0


if __name__ == "__main__":
    if len(sys.argv) == 4 and sys.argv[1] == "--one":
        _run_one(sys.argv[2], sys.argv[3])
    else:
        sys.exit(main(sys.argv[1:]))
