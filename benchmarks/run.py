"""Benchmark: catcheck against a plain pyarrow scan of the same columns.

Writes demo catalogues (``catcheck demo`` data) of the requested sizes, then for each size
times, each case in its own fresh Python process so that its peak memory is its own:

* ``scan``: a plain pyarrow read of the columns the profile needs, batch by batch;
* ``core``: ``catcheck.check`` with the core pack, writing a full report;
* ``evo``: the evolution and clusters packs (the two-pass cluster check), one worker;
* ``all``: the default packs, one worker;
* ``all-w2``: the same with ``--workers 2`` (worker processes);
* ``core-w2``: the core pack with ``--workers 2``;
* ``rows-out``: the default packs, one worker, also writing the annotated catalogue and
  the clean/flagged split (``--annotate --split``).

It prints the seconds, the ratio of each case to the scan of the same size in the same
benchmark session, and the peak memory: the proportional set size (PSS, from
``/proc/PID/smaps_rollup``) of the case's process plus its worker processes, sampled every
20 ms and summed.  PSS counts a page shared by n processes as 1/n in each, so forked
workers (which share the parent's pages until they write to them) are not counted twice;
for a single process it is its RSS less its share of shared libraries.  Usage (after
``pip install .``)::

    python benchmarks/run.py --rows 1000000 10000000 [--cases scan core all] [--data DIR]
"""

from __future__ import annotations

import argparse
import importlib
import json
import os
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Callable
from pathlib import Path


class PeakMemory:
    """Samples the PSS of this process and its child processes until stopped."""

    def __init__(self, interval: float = 0.02) -> None:
        self.interval = interval
        self.peak_kb = 0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def __enter__(self) -> PeakMemory:
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        self._thread.join()
        self._sample()

    def _run(self) -> None:
        while not self._stop.wait(self.interval):
            self._sample()

    def _sample(self) -> None:
        pids = [os.getpid(), *_children(os.getpid())]
        self.peak_kb = max(self.peak_kb, sum(_pss_kb(pid) for pid in pids))


def _children(pid: int) -> list[int]:
    try:
        with open(f"/proc/{pid}/task/{pid}/children") as listing:
            return [int(child) for child in listing.read().split()]
    except OSError:
        return []


def _pss_kb(pid: int) -> int:
    try:
        with open(f"/proc/{pid}/smaps_rollup") as rollup:
            for line in rollup:
                if line.startswith("Pss:"):
                    return int(line.split()[1])
    except OSError:
        pass
    return 0


def case_scan(catalogue: Path, profile: Path, batch_rows: int) -> None:
    import pyarrow.parquet as pq

    from catcheck.profile import load_profile

    columns = load_profile(profile).columns
    rows = 0
    for batch in pq.ParquetFile(catalogue, pre_buffer=False).iter_batches(batch_size=batch_rows,
                                                        columns=columns):
        rows += batch.num_rows
    assert rows > 0


CASES = {  # packs (None: catcheck's default packs), workers, extra keywords
    "core": (["core"], 1, {}),
    "evo": (["evolution", "clusters"], 1, {}),
    "all": (None, 1, {}),
    "all-w2": (None, 2, {}),
    "core-w2": (["core"], 2, {}),
    "rows-out": (None, 1, {"annotate": True, "split": True}),
}


def case_check(catalogue: Path, profile: Path, batch_rows: int, case: str, out: Path) -> None:
    import catcheck
    from catcheck.packs import DEFAULT_PACKS

    packs, workers, extra = CASES[case]
    catcheck.check(catalogue, profile, packs or DEFAULT_PACKS, out=out, fail_on="none",
                   batch_rows=batch_rows, workers=workers, **extra)


def child(args: argparse.Namespace) -> None:
    # imports are not part of the timed work; every case runs tuned as the CLI runs
    importlib.import_module("pyarrow.parquet")
    importlib.import_module("catcheck.api")
    importlib.import_module("catcheck.tuning").keep_freed_memory()
    with PeakMemory() as memory:
        started = time.perf_counter()
        if args.child == "scan":
            case_scan(args.catalogue, args.profile, args.batch_rows)
        else:
            case_check(args.catalogue, args.profile, args.batch_rows, args.child, args.out)
        seconds = time.perf_counter() - started
    print(json.dumps({"seconds": seconds, "peak_mb": memory.peak_kb / 1024.0}))


def _numpy_work() -> None:
    """Array arithmetic on batch-sized float64 arrays, as the rules do (about 0.5 s)."""
    import numpy as np

    values = np.random.default_rng(1).random(262_144)
    for _ in range(1500):
        np.sqrt(values) * 2.0 + values


def _python_work() -> None:
    """Plain Python, as message formatting is (about 0.5 s)."""
    total = 0
    for number in range(10_000_000):
        total += number


def parallel_capacity(work: Callable[[], None]) -> float:
    """How many times the work of one process two forked processes get done in the same
    time on this machine (2.0 on two free, independent cores): the ceiling of what
    ``--workers 2`` can gain over one worker.  Linux only (fork)."""
    started = time.perf_counter()
    work()
    alone = time.perf_counter() - started
    started = time.perf_counter()
    children = []
    for _ in range(2):
        pid = os.fork()
        if pid == 0:
            try:
                work()
            finally:
                os._exit(0)
        children.append(pid)
    for pid in children:
        os.waitpid(pid, 0)
    return 2 * alone / (time.perf_counter() - started)


def run_case(case: str, catalogue: Path, profile: Path, args: argparse.Namespace,
             out: Path) -> dict[str, float]:
    command = [sys.executable, __file__, "--child", case, "--catalogue", str(catalogue),
               "--profile", str(profile), "--batch-rows", str(args.batch_rows),
               "--out", str(out)]
    done = subprocess.run(command, capture_output=True, text=True)
    if done.returncode:
        sys.exit(f"benchmark case {case!r} failed:\n{done.stderr.strip()}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--rows", type=int, nargs="+", default=[1_000_000, 10_000_000])
    parser.add_argument("--cases", nargs="+", default=["scan", *CASES],
                        choices=["scan", *CASES])
    parser.add_argument("--batch-rows", type=int, default=262_144)
    parser.add_argument("--repeat", type=int, default=2, help="best of N runs per case")
    parser.add_argument("--data", type=Path, default=None,
                        help="where demo catalogues are written and kept (default: temp)")
    parser.add_argument("--child", choices=["scan", *CASES], help=argparse.SUPPRESS)
    parser.add_argument("--catalogue", type=Path, help=argparse.SUPPRESS)
    parser.add_argument("--profile", type=Path, help=argparse.SUPPRESS)
    parser.add_argument("--out", type=Path, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child(args)
        return

    from catcheck.demo import write_demo

    data = args.data or Path(tempfile.mkdtemp(prefix="catcheck-bench-"))
    print(f"batch rows: {args.batch_rows:,}; best of {args.repeat}; peak memory (PSS) per case "
          "(each case in its own process, worker processes added)")
    print(f"this machine: {os.cpu_count()} cores; two processes at once do "
          f"{parallel_capacity(_numpy_work):.2f}x the array arithmetic of one and "
          f"{parallel_capacity(_python_work):.2f}x the plain Python (2.00x on two free cores; "
          "the ceiling for --workers 2)")
    print(f"{'rows':>12} {'case':<8} {'seconds':>9} {'ratio':>7} {'peak PSS MB':>12}")
    for rows in args.rows:
        folder = data / f"demo-{rows}"
        if not (folder / "catalogue.parquet").exists():
            write_demo(folder, rows=rows, seed=1)
        catalogue, profile = folder / "catalogue.parquet", folder / "profile.toml"
        # untimed: bring the file into the page cache, so that no case (the scan first
        # of all) pays for reading from disk what the next case finds in memory
        run_case("scan", catalogue, profile, args, folder / "report")
        results = {}
        cases = ["scan", *(c for c in args.cases if c != "scan")]
        for case in cases:
            runs = [run_case(case, catalogue, profile, args, folder / "report")
                    for _ in range(args.repeat)]
            results[case] = min(runs, key=lambda r: r["seconds"])
        scan = results["scan"]["seconds"]
        for case, result in results.items():
            print(f"{rows:>12,} {case:<8} {result['seconds']:>9.2f} "
                  f"{result['seconds'] / scan:>6.2f}x {result['peak_mb']:>12.0f}")
        for one, two in (("all", "all-w2"), ("core", "core-w2")):
            if one in results and two in results:
                gain = results[one]["seconds"] / results[two]["seconds"]
                print(f"{rows:>12,} {two} is {gain:.2f}x as fast as {one}")


if __name__ == "__main__":
    main()
