#!/usr/bin/env python3
"""Latency of `waymark query` held open on a pipe, one query at a time.

Sends the first N look-ups of a queries file to one `waymark query INDEX -k K` process,
writing each line only after the previous answer has been read, and prints p50/p95/mean of
the time from writing a line to reading its answer. Then answers the same N queries with
`--queries FILE --summary` and prints its per-query time, for comparison.

    scripts/pipe-latency.py register.wmk demo-data/lookups.txt [-n 200] [-k 3] [--bin PATH]
"""

import argparse
import json
import os
import re
import statistics
import subprocess
import sys
import tempfile
import time


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("index")
    ap.add_argument("queries")
    ap.add_argument("-n", type=int, default=200, help="number of queries (200)")
    ap.add_argument("-k", type=int, default=3, help="neighbours per query (3)")
    ap.add_argument("--bin", default="target/release/waymark", help="the waymark binary")
    a = ap.parse_args()

    with open(a.queries, encoding="utf-8") as f:
        queries = [line.rstrip("\r\n") for line in f][: a.n]
    if not queries:
        print(f"{a.queries}: no queries", file=sys.stderr)
        return 2

    p = subprocess.Popen(
        [a.bin, "query", a.index, "-k", str(a.k)],
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
    )
    times = []
    for n, q in enumerate(queries, 1):
        t0 = time.perf_counter()
        p.stdin.write(q.encode() + b"\n")
        p.stdin.flush()
        answer = p.stdout.readline()
        times.append(time.perf_counter() - t0)
        if not answer:
            print(f"no answer to line {n}", file=sys.stderr)
            return 1
        got = json.loads(answer)
        if got.get("line") != n or got.get("query") != q:
            print(f"answer out of step at line {n}: {answer!r}", file=sys.stderr)
            return 1
    p.stdin.close()
    if p.wait() != 0:
        print(f"waymark exited with {p.returncode}", file=sys.stderr)
        return 1
    ms = sorted(t * 1e3 for t in times)
    p95 = ms[min(len(ms) - 1, round(0.95 * (len(ms) - 1)))]
    print(
        f"pipe, one query at a time: {len(ms)} queries, p50 {statistics.median(ms):.3f} ms, "
        f"p95 {p95:.3f} ms, mean {statistics.fmean(ms):.3f} ms"
    )

    with tempfile.TemporaryDirectory() as d:
        qfile = os.path.join(d, "queries.txt")
        with open(qfile, "w", encoding="utf-8") as f:
            f.write("".join(q + "\n" for q in queries))
        r = subprocess.run(
            [a.bin, "query", a.index, "-k", str(a.k), "--queries", qfile, "--summary"],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.PIPE,
            text=True,
            check=True,
        )
    m = re.search(r"\(([0-9.]+) queries/s\)", r.stderr)
    if m:
        qps = float(m.group(1))
        print(f"--queries FILE, same queries: {qps:.0f} queries/s, {1e3 / qps:.3f} ms per query")
    else:
        print(r.stderr.strip())
    return 0


if __name__ == "__main__":
    sys.exit(main())
