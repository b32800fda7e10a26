"""Peak memory of a study of many replications streamed to a results store.

Run from the repository root::

    .venv/bin/python benchmarks/store_memory.py                      # 100,000 replications
    .venv/bin/python benchmarks/store_memory.py --replications 2000  # quicker

A small market (the rehearsal-room scenario scaled down to 4 rooms) with one
customer-side arm, short windows: each replication is three tiny simulations.
The study runs with ``workers`` processes into a fresh results store, in a
fresh Python process per size, and the script prints the peak resident memory
(the parent and the largest worker, from ``getrusage``) at a tenth of the
replications and at all of them: flat memory means the second is not ten times
the first. Target: under 1 GiB at 100,000 replications. Asserts nothing.
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import marketsim as ms


def small_study() -> ms.Study:
    market = ms.scenarios.rehearsal_rooms().replace(listing_counts=[3, 1], arrival_rate=2.0)
    return ms.Study(market, ms.scenarios.instant_confirmation(), [ms.CustomerSide(0.5)],
                    horizon=2.0, burn_in=0.5)


def measure(replications: int, workers: int) -> dict:
    """Run the study into a fresh store here; peak memory in MiB and wall time."""
    with tempfile.TemporaryDirectory() as folder:
        began = time.perf_counter()
        result = small_study().run(replications, seed=1, workers=workers, progress=False,
                                   store=Path(folder) / "store")
        elapsed = time.perf_counter() - began
        chunks = len(list(Path(folder).glob("store/study-*/*.parquet")))
    own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    children = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
    return {"replications": result.completed, "parent_mib": own, "worker_mib": children,
            "seconds": elapsed, "chunks": chunks}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--replications", type=int, default=100_000)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        print(json.dumps(measure(args.replications, args.workers)))
        return
    rows = []
    for count in (max(2, args.replications // 10), args.replications):
        done = subprocess.run(
            [sys.executable, __file__, "--child", "--replications", str(count),
             "--workers", str(args.workers)],
            capture_output=True, text=True, check=True)
        rows.append(json.loads(done.stdout.strip().splitlines()[-1]))
    for row in rows:
        print(f"{row['replications']:>8,} replications: peak {row['parent_mib']:7.1f} MiB "
              f"(parent), {row['worker_mib']:7.1f} MiB (largest worker), "
              f"{row['seconds']:6.1f} s, {row['chunks']} chunks")
    growth = rows[1]["parent_mib"] / rows[0]["parent_mib"]
    print(f"peak memory at {rows[1]['replications']:,} over at {rows[0]['replications']:,} "
          f"replications: {growth:.2f}x (flat is about 1x; target under 1 GiB: "
          f"{max(rows[1]['parent_mib'], rows[1]['worker_mib']):.0f} MiB)")


if __name__ == "__main__":
    main()
