#!/usr/bin/env python3
"""Memory-budget check of `terrastack build`: a large generated DSM, about twenty terrain
bands, `--memory BUDGET`; the build's peak resident memory must stay under the budget.

Usage:
    cargo build --release
    python3 scripts/bench_memory.py [--size 20000] [--memory 2G] [--workdir DIR] [--keep]
    python3 scripts/bench_memory.py --size 4000 --memory 512M      # quick run

The DSM (float32, 0.1 m cells, the closed-form surface of bench_build.py) is written with
rasterio in windows of 512 rows, so this script itself stays small whatever the size. The
recipe asks for twenty terrain bands: elevation, Horn slope, northness, eastness, the five
Evans–Young curvatures, TRI, and TPI, DEV, roughness, relative elevation and local relief
at radii of 1 m and 5 m (disc windows).

Peak resident memory is read two ways: VmHWM from /proc/PID/status while the build runs
(polled every 0.2 s, also giving the peak at each tenth of the blocks) and ru_maxrss of
the finished child; the larger is compared with the budget. `--max-seconds` stops a build
that would run too long and reports the peak up to then, clearly marked as partial.

Large files live under --workdir (default /tmp/terrastack-bench-memory) and are deleted
at the end unless --keep. Exit status: 0 when the peak is under the budget, 1 otherwise.
"""

import argparse
import os
import re
import shutil
import subprocess
import sys
import time


sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from bench_build import fmt_bytes, write_dsm  # noqa: E402

REPO = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
FEATURES = ("elevation,slope,northness,eastness,curvature,tri,"
            "tpi,dev,roughness,relative_elevation,local_relief")
SCALES = "1,5"


def parse_size(text):
    m = re.fullmatch(r"\s*(\d+(?:\.\d+)?)\s*([KMGT]?)i?B?\s*", text, re.IGNORECASE)
    if not m:
        raise SystemExit(f"bench_memory.py: cannot read the size {text!r} (e.g. 2G, 512M)")
    unit = {"": 1, "K": 2**10, "M": 2**20, "G": 2**30, "T": 2**40}[m.group(2).upper()]
    return int(float(m.group(1)) * unit)


def vm_hwm(pid):
    """VmHWM of a live process in bytes, or None once it is gone."""
    try:
        with open(f"/proc/{pid}/status") as f:
            for line in f:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        return None
    return None


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--size", type=int, default=20000, help="DSM side in cells (default 20000)")
    ap.add_argument("--memory", default="2G", help="terrastack --memory (default 2G)")
    ap.add_argument("--threads", type=int, help="terrastack --threads (default: all cores)")
    ap.add_argument("--workdir", default="/tmp/terrastack-bench-memory")
    ap.add_argument("--binary", default=os.path.join(REPO, "target", "release", "terrastack"))
    ap.add_argument("--max-seconds", type=float,
                    help="stop the build after this long and report the peak so far")
    ap.add_argument("--keep", action="store_true", help="keep the generated files")
    args = ap.parse_args()

    if not os.path.exists(args.binary):
        print(f"bench_memory.py: {args.binary} not found; run `cargo build --release` first",
              file=sys.stderr)
        return 2
    budget = parse_size(args.memory)
    n = args.size
    work = os.path.join(args.workdir, f"n{n}")
    shutil.rmtree(work, ignore_errors=True)
    os.makedirs(work)
    dsm = os.path.join(work, "dsm.tif")
    try:
        t0 = time.perf_counter()
        write_dsm(dsm, n, bigtiff="YES")
        print(f"DSM: {n} x {n} float32 ({fmt_bytes(os.path.getsize(dsm))} on disk, "
              f"{fmt_bytes(4 * n * n)} in memory), generated in {time.perf_counter() - t0:.0f} s",
              flush=True)
        out = os.path.join(work, "stack")
        cmd = [args.binary, "build", "--dsm", dsm, "--features", FEATURES, "--scales", SCALES,
               "--memory", args.memory, "--out", out]
        if args.threads:
            cmd += ["--threads", str(args.threads)]
        print("build:", " ".join(cmd), flush=True)
        log_path = os.path.join(work, "build.log")
        start = time.perf_counter()
        stopped = False
        peak = 0
        with open(log_path, "w") as log:
            proc = subprocess.Popen(cmd, stdout=log, stderr=subprocess.STDOUT)
            seen = 0
            while True:
                pid, status, usage = os.wait4(proc.pid, os.WNOHANG)
                if pid != 0:
                    break
                hwm = vm_hwm(proc.pid)
                if hwm is not None:
                    peak = max(peak, hwm)
                # Progress lines (one per tenth of the blocks) with the peak so far; the
                # band table of the summary is left out.
                with open(log_path) as f:
                    lines = f.read().splitlines()
                for line in lines[seen:]:
                    if line.strip() and not re.match(r"^\s+\d+\s", line):
                        print(f"  [{time.perf_counter() - start:7.0f} s, peak "
                              f"{fmt_bytes(peak)}] {line}", flush=True)
                seen = len(lines)
                if args.max_seconds and time.perf_counter() - start > args.max_seconds:
                    proc.terminate()
                    stopped = True
                    _, status, usage = os.wait4(proc.pid, 0)
                    break
                time.sleep(0.2)
        wall = time.perf_counter() - start
        rc = os.waitstatus_to_exitcode(status)
        peak = max(peak, usage.ru_maxrss * 1024)
        print()
        if stopped:
            print(f"PARTIAL: the build was stopped after {wall:.0f} s (--max-seconds); "
                  "the peak below covers only the blocks done by then")
        elif rc != 0:
            print(open(log_path).read()[-3000:], file=sys.stderr)
            print(f"the build failed (exit {rc})")
            return 1
        stack_tif = os.path.join(out, "stack.tif")
        size = os.path.getsize(stack_tif) if os.path.exists(stack_tif) else None
        print(f"size {n} x {n}, 20 bands, budget {fmt_bytes(budget)} (--memory {args.memory})")
        print(f"peak resident memory {fmt_bytes(peak)} = {peak / budget:.2f} x budget: "
              f"{'under' if peak <= budget else 'OVER'} the budget")
        print(f"wall time {wall:.0f} s, CPU time {usage.ru_utime + usage.ru_stime:.0f} s "
              "(machine shared with other work)")
        if size is not None:
            print(f"stack.tif {fmt_bytes(size)} ({size / (4 * 20 * n * n):.2f} x uncompressed)")
        return 0 if peak <= budget else 1
    finally:
        if not args.keep:
            shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main())
