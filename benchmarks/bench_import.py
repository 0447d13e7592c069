"""Speed and memory of ``perftest.read_run`` against ``pandas.read_csv(engine="pyarrow")``.

Targets: reading a file of at least 10 million values costs at most 1.5 x the time of
``pandas.read_csv(engine="pyarrow")`` on the same file, and the peak memory of the
import is at most 2 x the size of the final SI frame (``Run.data``).

Method
------
* A file of 50,000 rows x 200 tags (10 M values) is written to a temporary
  directory: ISO 8601 stamps one minute apart, a units row under the header
  (degC, bar, t/h, MW, kPa), values with 3 decimals.
* Each reader runs in its own fresh child process.  Time: the best of ``--repeat``
  calls (wall clock, ``time.perf_counter``).  Memory: the rise of the peak
  resident set size (``resource.getrusage(...).ru_maxrss``) over the resident
  size just before the first call (``/proc/self/statm``).  RSS counts every
  allocation (numpy, pyarrow's memory pool, Python objects, library code paged
  in), which tracemalloc would not (pyarrow allocates outside Python's allocator).
* Warm and cold: the target is checked on a "warm" child, which first reads a
  three-row file of the same layout with the same reader, so that the one-time
  cost of loading libraries (scipy under ``perftest.run.core``, pint's unit registry,
  pyarrow's CSV code: tens of MB that do not grow with the file) is not counted
  against the file.  A "cold" child, which reads the large file first, is
  measured as well and printed for information.
* The ratios printed are perftest / pandas for time, and peak rise / final frame
  bytes for memory; the reference times are measured in the same run.  The memory
  line also gives the peak over everything the import returns (SI frame + mask;
  ``Run.raw`` is read again from the file only when asked for, so it holds
  nothing here).
* ``read_parts`` is the importer alone; ``read_run`` adds the ``Run`` constructor.

Usage::

    python benchmarks/bench_import.py [--rows 50000] [--tags 200] [--repeat 3]
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

TIME_TARGET = 1.5
MEMORY_TARGET = 2.0
_UNITS = ("degC", "bar", "t/h", "MW", "kPa")


def write_file(path: Path, rows: int, tags: int, seed: int = 1) -> None:
    """Write the benchmark CSV (header, units row, ``rows`` x ``tags`` values)."""
    import numpy as np
    import pandas as pd
    import pyarrow as pa
    import pyarrow.csv as pacsv

    rng = np.random.default_rng(seed)
    names = [f"TAG-{i:03d}" for i in range(tags)]
    units = [_UNITS[i % len(_UNITS)] for i in range(tags)]
    stamps = pd.date_range("2031-01-01", periods=rows, freq="1min").strftime("%Y-%m-%d %H:%M:%S")
    base = rng.uniform(10.0, 500.0, tags)
    cols = {"time": pa.array(np.asarray(stamps, dtype=object), pa.string())}
    for i, name in enumerate(names):
        cols[name] = pa.array(np.round(base[i] + rng.normal(0.0, 1.0, rows), 3))
    with open(path, "w", encoding="utf-8") as fh:
        fh.write(",".join(["time", *names]) + "\n")
        fh.write(",".join(["", *units]) + "\n")
    with open(path, "ab") as fh:
        pacsv.write_csv(pa.table(cols), fh, write_options=pacsv.WriteOptions(include_header=False))


def _rss_now() -> int:
    with open("/proc/self/statm") as fh:
        return int(fh.read().split()[1]) * os.sysconf("SC_PAGE_SIZE")


def child(kind: str, path: str, repeat: int, warm: bool) -> dict:
    """Run one reader in this process; return time, peak memory rise and frame size."""
    import pandas as pd

    small = Path(path).with_name("warm_up.csv")
    if kind == "pandas":
        with open(path, encoding="utf-8") as fh:
            names = fh.readline().rstrip("\n").split(",")

        def read(file=path):
            # the units row is skipped so that pandas types the columns as numbers
            return pd.read_csv(file, engine="pyarrow", skiprows=2, header=None, names=names)

    else:
        from perftest.importers import read_parts, read_run

        reader = read_run if kind == "read_run" else read_parts

        def read(file=path):
            return reader(file)

    if warm:
        read(small)

    before = _rss_now()
    t0 = time.perf_counter()
    out = read()
    first = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024  # KiB on Linux
    if kind == "pandas":
        frame_bytes = int(out.select_dtypes("number").to_numpy().nbytes)
        shape = out.shape
        all_bytes = frame_bytes
    else:
        parts = vars(out) if kind == "read_run" else out
        data = parts["data"]
        frame_bytes = int(data.to_numpy().nbytes)
        shape = data.shape
        all_bytes = frame_bytes + int(parts["mask"].to_numpy().nbytes)
        del parts, data
    del out
    times = [first]
    for _ in range(repeat - 1):
        t0 = time.perf_counter()
        read()
        times.append(time.perf_counter() - t0)
    return {
        "time": min(times),
        "peak_rise": peak - before,
        "frame_bytes": frame_bytes,
        "all_bytes": all_bytes,
        "shape": list(shape),
    }


def _spawn(kind: str, path: Path, repeat: int, warm: bool) -> dict:
    cmd = [sys.executable, __file__, "--child", kind, "--file", str(path), "--repeat", str(repeat)]
    out = subprocess.run(
        cmd + (["--warm"] if warm else []), check=True, capture_output=True, text=True
    )
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=50_000)
    ap.add_argument("--tags", type=int, default=200)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--child", choices=["pandas", "read_parts", "read_run"])
    ap.add_argument("--file")
    ap.add_argument("--warm", action="store_true")
    args = ap.parse_args(argv)
    if args.child:
        print(json.dumps(child(args.child, args.file, args.repeat, args.warm)))
        return 0

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "bench_run.csv"
        t0 = time.perf_counter()
        write_file(path, args.rows, args.tags)
        write_file(path.with_name("warm_up.csv"), 3, args.tags, seed=2)
        size_mb = path.stat().st_size / 1e6
        print(
            f"file: {args.rows} rows x {args.tags} tags = {args.rows * args.tags / 1e6:.2f} M "
            f"values, {size_mb:.0f} MB (written in {time.perf_counter() - t0:.1f} s)"
        )
        kinds = ("pandas", "read_parts", "read_run")
        warm = {k: _spawn(k, path, args.repeat, True) for k in kinds}
        cold = {k: _spawn(k, path, 1, False) for k in kinds}
    ref = warm["pandas"]
    print(
        f"pandas.read_csv(engine='pyarrow'): {ref['time']:.3f} s, peak rise "
        f"{ref['peak_rise'] / 1e6:.0f} MB = {ref['peak_rise'] / ref['frame_bytes']:.2f} x its "
        f"frame of {ref['frame_bytes'] / 1e6:.0f} MB (cold: "
        f"{cold['pandas']['peak_rise'] / cold['pandas']['frame_bytes']:.2f} x)"
    )
    ok = True
    for kind in kinds[1:]:
        r = warm[kind]
        t_ratio = r["time"] / ref["time"]
        m_ratio = r["peak_rise"] / r["frame_bytes"]
        t_ok, m_ok = t_ratio <= TIME_TARGET, m_ratio <= MEMORY_TARGET
        ok &= t_ok and m_ok
        print(
            f"{kind}: {r['time']:.3f} s, time ratio {t_ratio:.2f} (target <= {TIME_TARGET}) "
            f"{'PASS' if t_ok else 'FAIL'}; peak rise {r['peak_rise'] / 1e6:.0f} MB = "
            f"{m_ratio:.2f} x the SI frame of {r['frame_bytes'] / 1e6:.0f} MB "
            f"(target <= {MEMORY_TARGET}) {'PASS' if m_ok else 'FAIL'}; "
            f"= {r['peak_rise'] / r['all_bytes']:.2f} x all frames returned (SI + mask, "
            f"{r['all_bytes'] / 1e6:.0f} MB); cold process: "
            f"{cold[kind]['peak_rise'] / cold[kind]['frame_bytes']:.2f} x"
        )
    print("overall:", "PASS" if ok else "FAIL")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
