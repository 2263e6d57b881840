"""The panel for a step after the checks: from the raw CSV vs from the stored panel.

    python benchmarks/bench_stored_panel.py [--quick] [--records N] [--keep DIR] [--repeat R]

Uses the long file of ``bench_check.py`` (same generator and codebook: full size
8,800,000 records, about 200 MB; ``--quick`` 500,000; ``--keep DIR`` writes it
there and reuses it, so the two benchmarks can share one file). Each measurement
runs in a fresh Python process (its own peak memory, nothing warm in memory
but the operating system's file cache, which both routes get):

- raw route (the baseline): ``load_panel([csv], codebook)``, what every step
  after the checks did before the stored panel;
- writing: ``write_stored_panel`` of that panel, the check step's extra work
  (timed after the same ``load_panel``, which the check step does anyway);
- stored route: ``read_stored_panel(parquet, codebook)``, what those steps do now.

Prints each time (best of ``--repeat``, default 3, for the two routes), the
file sizes and the ratio stored / raw measured in this run. The ratio is what
matters: the machine may be shared while this runs.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))

from bench_check import CODEBOOK, FULL, QUICK, measure as _measure_check  # noqa: E402


def child(kind: str, data: str, codebook: str, stored: str) -> None:
    import resource

    from wavetrail.codebook import load_codebook
    from wavetrail.panel import load_panel
    from wavetrail.stored_panel import read_stored_panel, write_stored_panel
    import pyarrow.parquet  # noqa: F401  (imported by both routes before the clock starts)

    t0 = time.perf_counter()
    extra: dict = {}
    if kind == "raw":
        panel = load_panel([data], load_codebook(codebook))
        extra["rows"] = len(panel.long)
    elif kind == "write":
        panel = load_panel([data], load_codebook(codebook))
        t0 = time.perf_counter()
        write_stored_panel(panel, stored, codebook_path=codebook)
        extra["bytes"] = Path(stored).stat().st_size
    else:
        panel = read_stored_panel(stored, codebook)
        extra["rows"] = len(panel.long)
    seconds = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    print(json.dumps({"seconds": seconds, "peak_bytes": peak, **extra}))


def measure(kind: str, data: Path, codebook: Path, stored: Path) -> dict:
    out = subprocess.run([sys.executable, __file__, "--child", kind, str(data), str(codebook), str(stored)],
                         check=True, capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--quick", action="store_true", help=f"{QUICK:,} records instead of {FULL:,}")
    ap.add_argument("--records", type=int, default=None)
    ap.add_argument("--keep", type=Path, default=None, help="folder of bench_check.py's data (reused when it fits)")
    ap.add_argument("--repeat", type=int, default=3, help="runs of each route; the best time is shown")
    ap.add_argument("--child", nargs=4, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        child(*args.child)
        return
    n = args.records or (QUICK if args.quick else FULL)
    with tempfile.TemporaryDirectory() as tmp:
        folder = args.keep or Path(tmp)
        folder.mkdir(parents=True, exist_ok=True)
        data, codebook, stored = folder / "long.csv", folder / "codebook.yaml", Path(tmp) / "panel.parquet"
        codebook.write_text(CODEBOOK, encoding="utf-8")
        stamp = folder / "long.records"
        if data.exists() and stamp.exists() and stamp.read_text() == str(n):
            print(f"reusing {data} ({n:,} records, {data.stat().st_size / 1e6:.0f} MB)")
        else:
            t = time.perf_counter()
            size = _measure_check("generate", data, str(n))["bytes"]
            stamp.write_text(str(n))
            print(f"generated {n:,} records, {size / 1e6:.0f} MB in {time.perf_counter() - t:.1f} s")
        wrote = measure("write", data, codebook, stored)
        raw = [measure("raw", data, codebook, stored) for _ in range(args.repeat)]
        back = [measure("stored", data, codebook, stored) for _ in range(args.repeat)]
        best_raw = min(raw, key=lambda r: r["seconds"])
        best_back = min(back, key=lambda r: r["seconds"])
        assert best_raw["rows"] == best_back["rows"]
        print(f"tidy panel rows: {best_raw['rows']:,}; csv {data.stat().st_size / 1e6:.0f} MB, "
              f"stored panel {wrote['bytes'] / 1e6:.0f} MB")
        print(f"check step, writing the stored panel: {wrote['seconds']:.2f} s (once per build)")
        print(f"panel from the raw CSV (load_panel):  {best_raw['seconds']:.2f} s, "
              f"peak {best_raw['peak_bytes'] / 2**30:.2f} GiB  (best of {args.repeat})")
        print(f"panel from the stored panel:          {best_back['seconds']:.2f} s, "
              f"peak {best_back['peak_bytes'] / 2**30:.2f} GiB  (best of {args.repeat})")
        ratio = best_back["seconds"] / best_raw["seconds"]
        print(f"ratio stored / raw: {ratio:.3f} ({1 / ratio:.1f}x faster per step and per forest shard)")


if __name__ == "__main__":
    main()
