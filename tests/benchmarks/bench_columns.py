"""Reading cost against the number of columns: linear, like pandas reading the same file.

A table of ``age`` and ``n - 1`` proxies (20 data rows) is read with :func:`align.open_record`
(header checks, number parsing, missing-value codes, the record's validation) and with
``pandas.read_csv`` (the same-run baseline), in paired interleaved rounds
(:mod:`_timing`), for 1,000 to 19,000 columns (the library's column limit is raised for the
run: :mod:`align.limits`). Printed: time per column and the slow-down against pandas at each
size, and the exponents ``k`` of ``time ~ n**k`` fitted (least squares on logs) to each and
to the slow-down.

Requirement: the slow-down's exponent at most 0.2, i.e. reading grows like pandas reading
the same file (linear); on a loaded machine both absolute exponents drift up together, the
paired slow-down does not. Before the fix reading was quadratic (every proxy's DataArray
scanned all variables; each cell parsed column by column): 5,000 columns took 57 s.

Run: ``python tests/benchmarks/bench_columns.py [n ...]``
"""

from __future__ import annotations

import sys
import tempfile
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _timing import machine, paired  # noqa: E402

SIZES = (1_000, 2_000, 5_000, 10_000, 19_000)
ROWS = 20
LIMIT = 0.2


def wide_csv(path, columns, rows=ROWS):
    """``age`` (10, 20, ... yr) and ``columns - 1`` proxies of varied values."""
    names = ["age", *(f"c{i}" for i in range(columns - 1))]
    values = (np.arange(rows)[:, None] * 7 + np.arange(columns)[None, :]) % 97 + 0.5
    values[:, 0] = 10.0 * np.arange(1, rows + 1)
    lines = [",".join(names), *(",".join(f"{v:g}" for v in row) for row in values)]
    path.write_text("\n".join(lines) + "\n")
    return path


def read(path, open_record):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return open_record(path, age_reference="b2k")


def exponent(sizes, times):
    """``k`` of ``times ~ sizes**k`` (least squares on logs)."""
    return float(np.polyfit(np.log(sizes), np.log(times), 1)[0])


def main(sizes=SIZES):
    import pandas as pd

    from align.io import open_record
    from align.limits import use_limits

    print(machine())
    ours, theirs, slowdowns = [], [], []
    with tempfile.TemporaryDirectory() as folder, use_limits(columns=max(sizes) + 1):
        for n in sizes:
            path = wide_csv(Path(folder) / f"wide{n}.csv", n)

            rounds = 3 if n <= 5_000 else 1
            ratios, mine, base = paired(lambda p=path: read(p, open_record),
                                        lambda p=path: pd.read_csv(p), rounds=rounds)
            ours.append(mine)
            theirs.append(base)
            slowdowns.append(float(np.median(ratios)))
            print(f"{n:>6} columns: open_record {mine:.3g} s ({mine / n * 1e6:.0f} us per "
                  f"column), pandas.read_csv {base:.3g} s ({base / n * 1e6:.1f} us per column)"
                  f" -> slow-down {slowdowns[-1]:.3g} (median of {rounds} paired rounds)",
                  flush=True)
    k, k_pandas = exponent(sizes, ours), exponent(sizes, theirs)
    k_slow = exponent(sizes, slowdowns)
    print(f"fitted exponents: open_record {k:.2f}, pandas.read_csv {k_pandas:.2f}, slow-down "
          f"{k_slow:.2f} (requirement: slow-down <= {LIMIT:g}) "
          f"{'ok' if k_slow <= LIMIT else 'NOT MET'}")


if __name__ == "__main__":
    main(tuple(int(a) for a in sys.argv[1:]) or SIZES)
