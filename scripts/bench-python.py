#!/usr/bin/env python3
"""The Python package against the Rust API and the command line, on Debian's wamerican list
(104,334 words) with default settings and 1,000 typo queries (1–3 random edits of random
words of the list, seeded):

1. one approximate query, k = 10: p50 latency from Python (`Index.query`) against the Rust
   API (`Searcher::search`, `examples/query_latency.rs`), same index, same queries, one
   thread each;
2. many queries at once, k = 10: `Index.query_many` against `waymark query -k 10
   --queries FILE` (wall time of the whole command, JSON written to /dev/null), the
   queries repeated to 10,000 so that the command's start-up counts little;
3. a build from a Python list (`waymark.build`) against `waymark build FILE`;
4. the cost of a distance written in Python: microseconds per pair with a trivial
   function, in the function and in the layer that calls it.

Rounds alternate between the two sides and every figure of a round is printed; compare the
ratios. Run after scripts/test-data.sh and scripts/test-python.sh (the package installed in
.venv-test/) and `cargo build --release --bin waymark --example query_latency`:

    .venv-test/bin/python scripts/bench-python.py [--rounds 3]
"""

import argparse
import json
import os
import random
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import waymark

REPO = Path(__file__).resolve().parents[1]
WORDS = Path("/usr/share/dict/american-english")
BIN = REPO / "target" / "release" / "waymark"
LATENCY = REPO / "target" / "release" / "examples" / "query_latency"


def typos(words, count, seed):
    """1–3 random edits (insert, delete, substitute) of random words, in the list's letters."""
    rng = random.Random(seed)
    letters = sorted({c for w in words for c in w})
    out = []
    for _ in range(count):
        w = list(rng.choice(words))
        for _ in range(rng.randint(1, 3)):
            op = rng.choice("ids") if w else "i"
            i = rng.randrange(len(w) + (op == "i"))
            if op == "i":
                w.insert(i, rng.choice(letters))
            elif op == "d":
                del w[i]
            else:
                w[i] = rng.choice(letters)
        out.append("".join(w))
    return out


def wall(cmd, **kw):
    t = time.perf_counter()
    subprocess.run(cmd, check=True, **kw)
    return time.perf_counter() - t


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--rounds", type=int, default=3)
    args = ap.parse_args()
    for p, how in [(WORDS, "scripts/test-data.sh"), (BIN, "cargo build --release --bin waymark"),
                   (LATENCY, "cargo build --release --example query_latency")]:
        if not p.exists():
            sys.exit(f"bench-python: {p} is missing: {how}")
    words = WORDS.read_text(encoding="utf-8").splitlines()
    queries = typos(words, 1000, seed=17)
    with open("/proc/loadavg") as f:
        print(f"load average at start: {f.read().split()[0]}; {os.cpu_count()} cores; "
              f"{len(words)} words, {len(queries)} queries, waymark {waymark.__version__}")
    tmp = Path(tempfile.mkdtemp(prefix="bench-python-"))
    words_file, queries_file, many_file = tmp / "words.txt", tmp / "queries.txt", tmp / "many.txt"
    words_file.write_text("\n".join(words) + "\n", encoding="utf-8")
    queries_file.write_text("\n".join(queries) + "\n", encoding="utf-8")
    many = queries * 10
    many_file.write_text("\n".join(many) + "\n", encoding="utf-8")

    print("\n3. build, default settings (recall curve included)")
    builds = []
    for r in range(args.rounds):
        cli = wall([BIN, "build", words_file, "-o", tmp / "cli.wmk", "-q"])
        t = time.perf_counter()
        index = waymark.build(words, tmp / "py.wmk")
        py = time.perf_counter() - t
        builds.append((cli, py))
        print(f"  round {r + 1}: waymark build {cli:.2f} s, waymark.build(list) {py:.2f} s, ratio {py / cli:.2f}")

    print("\n1. one approximate query, k = 10, one thread: p50 latency")
    lat = []
    for r in range(args.rounds):
        out = subprocess.run([LATENCY, tmp / "py.wmk", queries_file, "--rounds", "3"],
                             check=True, capture_output=True, text=True)
        rust = json.loads(out.stdout)
        for q in queries:  # warm-up, as the Rust side's first round
            index.query(q, 10)
        times = []
        for _ in range(2):
            for q in queries:
                t = time.perf_counter_ns()
                index.query(q, 10)
                times.append((time.perf_counter_ns() - t) / 1000)
        times.sort()
        p50 = statistics.median(times)
        lat.append((rust["p50_us"], p50))
        print(f"  round {r + 1}: Rust API p50 {rust['p50_us']:.1f} µs (p90 {rust['p90_us']:.1f}), "
              f"Python p50 {p50:.1f} µs (p90 {times[int(0.9 * (len(times) - 1))]:.1f}), "
              f"ratio {p50 / rust['p50_us']:.3f}")

    print(f"\n2. many queries, k = 10, {len(many)} queries, all cores: throughput")
    thr = []
    with open(os.devnull, "w") as null:
        for r in range(args.rounds):
            cli = wall([BIN, "query", tmp / "py.wmk", "-k", "10", "--queries", many_file], stdout=null)
            t = time.perf_counter()
            numbers, distances = index.query_many(many, 10)
            py = time.perf_counter() - t
            thr.append((len(many) / cli, len(many) / py))
            print(f"  round {r + 1}: waymark query --queries {len(many) / cli:,.0f} q/s, "
                  f"Index.query_many {len(many) / py:,.0f} q/s, ratio {cli / py:.3f}")
    assert numbers.shape == (len(many), 10)

    print("\n4. a distance written in Python: cost per pair (5,000 words, d = 8, 200 queries, C = 500)")
    spent = {"pairs": 0, "calls": 0, "seconds": 0.0}

    def length_gap(query, items):
        t = time.perf_counter()
        out = [abs(len(query) - len(x)) for x in items]
        spent["seconds"] += time.perf_counter() - t
        spent["pairs"] += len(items)
        spent["calls"] += 1
        return out

    small = waymark.build(words[::20][:5000], tmp / "gap.wmk", metric=length_gap, integral=True,
                          dim=8, calibrate=False)
    for key in spent:
        spent[key] = 0
    t = time.perf_counter()
    for q in queries[:200]:
        small.query(q, 10, candidates=500)
    total = time.perf_counter() - t
    per_pair = 1e6 * total / spent["pairs"]
    inside = 1e6 * spent["seconds"] / spent["pairs"]
    print(f"  {spent['pairs']} pairs in {spent['calls']} calls, {total:.3f} s: {per_pair:.3f} µs per pair "
          f"in all, {inside:.3f} µs of it in the function, {per_pair - inside:.3f} µs in the layer")

    def med(pairs, i):
        return statistics.median(p[i] for p in pairs)

    print("\nsummary (medians over rounds)")
    print(f"  p50 latency: Python {med(lat, 1):.1f} µs vs Rust API {med(lat, 0):.1f} µs: "
          f"{med(lat, 1) / med(lat, 0):.3f}× (target ≤ 1.3×)")
    print(f"  throughput: Python {med(thr, 1):,.0f} q/s vs CLI {med(thr, 0):,.0f} q/s: "
          f"{med(thr, 1) / med(thr, 0):.3f}× (target ≥ 0.9×)")
    print(f"  build: Python list {med(builds, 1):.2f} s vs CLI file {med(builds, 0):.2f} s: "
          f"{med(builds, 1) / med(builds, 0):.3f}×")
    with open("/proc/loadavg") as f:
        print(f"load average at end: {f.read().split()[0]}")


if __name__ == "__main__":
    main()
