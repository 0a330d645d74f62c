"""Start-up cost of the command line against the floor of importing numpy and xarray.

Requirement (issue: fresh clone, fast start): ``corealign --help`` and ``corealign age`` at most
1.5x the time of ``python -c "import numpy, xarray"``; ``corealign info`` on a demo record at
most 3x. Rounds are interleaved (floor, command, floor, command, ...) and the median of the
paired ratios is reported, so a busy machine slows both sides of each pair alike.

Run: ``python tests/benchmarks/bench_startup.py [rounds]``
"""

from __future__ import annotations

import statistics
import subprocess
import sys
import time
from pathlib import Path

RECORDS = Path(__file__).resolve().parents[2] / "records"
FLOOR = [sys.executable, "-c", "import numpy, xarray"]
COMMANDS = {
    "corealign --help": (["--help"], 1.5),
    "corealign age 12785 --from BP --to BCE": (["age", "12785", "--from", "BP", "--to", "BCE"],
                                               1.5),
    "corealign info (demo record)": (["info", str(RECORDS / "hvd1_ice.nc")], 3.0),
}


def wall(args):
    start = time.perf_counter()
    subprocess.run(args, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - start


def main(rounds=7):
    wall(FLOOR)  # warm the file cache once
    for name, (args, limit) in COMMANDS.items():
        command = [sys.executable, "-m", "align", *args]
        wall(command)
        pairs = [(wall(FLOOR), wall(command)) for _ in range(rounds)]
        ratio = statistics.median(c / f for f, c in pairs)
        floor = statistics.median(f for f, _ in pairs)
        took = statistics.median(c for _, c in pairs)
        print(f"{name}: {took:.2f} s vs import numpy, xarray {floor:.2f} s -> median paired "
              f"ratio {ratio:.2f} (requirement: <= {limit:g}) "
              f"{'ok' if ratio <= limit else 'NOT MET'}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 7)
