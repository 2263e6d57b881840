"""Checking a large long file against reading it: time ratio and peak memory.

    python benchmarks/bench_check.py [--quick] [--records N] [--keep DIR] [--repeat K]

Generates a long CSV of N records (full size 8,800,000, about 200 MB; ``--quick``
500,000): person id, wave (6 waves, people drop out), four 1-5 items with
declared missing codes (-99, -98) and empty cells, a sprinkle of undeclared codes
(99) and out-of-range values, a sex category and a number. Then, each in a fresh
Python process (so each peak is its own):

- baseline: ``pandas.read_csv(path)`` alone;
- check: what ``wavetrail check`` runs on a project, ``run_checks([path], codebook)``
  (reading, the tidy panel, every check), plus ``describe`` and ``attrition`` as the
  workflow's check step adds them.

Prints both times, their ratio (goal: check <= 4x read_csv) and the peak resident
memory of the check process (``ru_maxrss``; goal <= 2 GB at full size), and the load
average before and after. The machine may be shared while this runs; the ratio compares two
runs a minute apart, so on a busy machine give ``--repeat K`` for K alternating pairs and
their median ratio.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

FULL, QUICK = 8_800_000, 500_000
SEED = 20261203
WAVES = [1, 2, 3, 4, 5, 6]
CODEBOOK = """\
study:
  id: pid
  wave: wave
  waves: [1, 2, 3, 4, 5, 6]
  time_scores: [0, 1, 2, 3, 4, 5]
variables:
  - {name: pid, type: integer}
  - {name: it1, type: integer, range: [1, 5], missing: {-99: refused, -98: do not know}, scale: mood}
  - {name: it2, type: integer, range: [1, 5], missing: {-99: refused, -98: do not know}, scale: mood}
  - {name: it3, type: integer, range: [1, 5], missing: {-99: refused, -98: do not know}, scale: mood}
  - {name: it4, type: integer, range: [1, 5], missing: {-99: refused, -98: do not know}, scale: mood}
  - {name: sex, type: category, levels: {1: girl, 2: boy}}
  - {name: hours, type: number}
scales:
  mood: {label: Mood}
"""


def generate(path: Path, n_records: int, seed: int = SEED) -> int:
    """Write the long file; returns its size in bytes."""
    rng = np.random.default_rng(seed)
    n_people = int(n_records / 4.6) + 1  # about 4.6 waves per person with the dropout below
    attend = rng.random((n_people, len(WAVES))) < np.linspace(1.0, 0.6, len(WAVES))
    attend[:, 0] = True
    person = np.repeat(np.arange(1, n_people + 1), len(WAVES))[attend.ravel()][:n_records]
    wave = np.tile(WAVES, n_people)[attend.ravel()][:n_records]
    n = len(person)
    cols = {"pid": person.astype(str), "wave": wave.astype(str)}
    for k in range(1, 5):
        item = rng.integers(1, 6, n).astype(str).astype(object)
        u = rng.random(n)
        item[u < 0.03] = "-99"
        item[(u >= 0.03) & (u < 0.05)] = "-98"
        item[(u >= 0.05) & (u < 0.07)] = ""
        item[(u >= 0.07) & (u < 0.0701)] = "99"   # an undeclared code
        item[(u >= 0.0701) & (u < 0.0702)] = "6"  # out of range
        cols[f"it{k}"] = item
    cols["sex"] = rng.integers(1, 3, n).astype(str)
    cols["hours"] = np.char.mod("%.1f", rng.gamma(2.0, 3.0, n))
    with open(path, "w", encoding="utf-8", newline="\n") as fh:
        fh.write(",".join(cols) + "\n")
        step = 500_000
        for start in range(0, n, step):
            block = [np.asarray(c[start:start + step], dtype=object) for c in cols.values()]
            fh.write("\n".join(",".join(row) for row in zip(*block)) + "\n")
    return path.stat().st_size


def child(kind: str, data: str, codebook: str) -> None:
    """Run one measurement in this process; print seconds and peak memory as JSON."""
    import resource

    import pandas as pd

    if kind == "generate":  # here, so the measuring parent stays small (ru_maxrss survives exec)
        size = generate(Path(data), int(codebook))
        print(json.dumps({"bytes": size}))
        return
    if kind == "check":
        from wavetrail.checks import attrition, describe, run_checks
        from wavetrail.codebook import load_codebook
        from wavetrail.panel import load_panel

    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    t0 = time.perf_counter()
    if kind == "read":
        frame = pd.read_csv(data)
        extra = {"rows": len(frame)}
    else:
        cb = load_codebook(codebook)
        panel = load_panel([data], cb)
        t_load = time.perf_counter() - t0
        findings = run_checks(panel)
        describe(panel)
        attrition(panel)
        extra = {"rows": len(panel.records), "findings": len(findings), "load_seconds": round(t_load, 2),
                 "errors": int((findings["severity"] == "error").sum())}
    seconds = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024  # Linux: KiB
    print(json.dumps({"seconds": seconds, "peak_bytes": peak, "start_bytes": before * 1024, **extra}))


def measure(kind: str, data: Path, codebook) -> dict:
    out = subprocess.run([sys.executable, __file__, "--child", kind, str(data), str(codebook)],
                         check=True, capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--quick", action="store_true", help=f"{QUICK:,} records instead of {FULL:,}")
    ap.add_argument("--records", type=int, default=None)
    ap.add_argument("--keep", type=Path, default=None,
                    help="write the data here and keep it (a later run with the same size reuses it)")
    ap.add_argument("--repeat", type=int, default=1,
                    help="pairs of measurements (read, then check); several give a median ratio on a shared machine")
    ap.add_argument("--child", nargs=3, metavar=("KIND", "DATA", "CODEBOOK"), help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        child(*args.child)
        return
    n = args.records or (QUICK if args.quick else FULL)
    with tempfile.TemporaryDirectory() as tmp:
        folder = args.keep or Path(tmp)
        folder.mkdir(parents=True, exist_ok=True)
        data, codebook = folder / "long.csv", folder / "codebook.yaml"
        codebook.write_text(CODEBOOK, encoding="utf-8")
        t = time.perf_counter()
        stamp = folder / "long.records"
        if args.keep and data.exists() and stamp.exists() and stamp.read_text() == str(n):
            print(f"reusing {data} ({n:,} records, {data.stat().st_size / 1e6:.0f} MB)")
        else:
            size = measure("generate", data, str(n))["bytes"]
            stamp.write_text(str(n))
            print(f"generated {n:,} records, {size / 1e6:.0f} MB in {time.perf_counter() - t:.1f} s")
        ratios, peaks = [], []
        print(f"load average at the start: {', '.join(f'{x:.1f}' for x in os.getloadavg())}")
        for _ in range(args.repeat):  # read and check alternate, so a change in the machine's load hits both
            read = measure("read", data, codebook)
            check = measure("check", data, codebook)
            ratio = check["seconds"] / read["seconds"]
            ratios.append(ratio)
            peaks.append(check["peak_bytes"])
            print(f"pandas.read_csv alone: {read['seconds']:.2f} s, peak {read['peak_bytes'] / 2**30:.2f} GiB")
            print(f"wavetrail check:       {check['seconds']:.2f} s (reading + tidy panel {check['load_seconds']} s), "
                  f"peak {check['peak_bytes'] / 2**30:.2f} GiB, {check['findings']} findings "
                  f"({check['errors']} errors, as planted)")
            print(f"ratio check / read_csv: {ratio:.2f}x (goal <= 4x)")
        print(f"load average at the end: {', '.join(f'{x:.1f}' for x in os.getloadavg())}")
        if len(ratios) > 1:
            print(f"median ratio over {len(ratios)} pairs: {float(np.median(ratios)):.2f}x "
                  f"(range {min(ratios):.2f}-{max(ratios):.2f}x; goal <= 4x)")
        print(f"peak memory of check: {max(peaks) / 2**30:.2f} GiB (goal <= 2 GiB at full size)")


if __name__ == "__main__":
    main()
