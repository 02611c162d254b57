#!/usr/bin/env python3
"""The reference scan for the benches: a general-purpose fuzzy-string library's parallel
all-pairs Levenshtein scan (rapidfuzz.process.cdist, all cores), k nearest words per query.

    reference-scan.py WORDS QUERIES K OUT [--cells N]

WORDS and QUERIES hold one string per line (UTF-8); line i of WORDS is word i. OUT gets one
line per query: `index:distance` pairs, nearest first, ties by word index. The first line
of OUT is a header of measured seconds:

    # load S cdist S select S blocks B

`load` is reading the two files (not timed as part of the scan); `cdist` is the time inside
rapidfuzz.process.cdist summed over the query blocks; `select` is the k-nearest selection in
numpy (argpartition, then ties by word index). Python start-up and imports are in none of
them. Queries go through in blocks of at most N cells (queries x words, default 2^25, 128 MiB
of int32), so memory stays bounded on large lists.
"""

import sys
import time


def main(argv):
    import argparse

    ap = argparse.ArgumentParser(description="reference k-NN scan (rapidfuzz cdist)")
    ap.add_argument("words")
    ap.add_argument("queries")
    ap.add_argument("k", type=int)
    ap.add_argument("out")
    ap.add_argument("--cells", type=int, default=1 << 25)
    a = ap.parse_args(argv[1:])
    words_path, queries_path, k, out_path, cells = a.words, a.queries, a.k, a.out, a.cells
    if k < 1 or cells < 1:
        sys.stderr.write("reference-scan: K and --cells must be at least 1\n")
        return 2
    try:
        import numpy as np
        from rapidfuzz import process
        from rapidfuzz.distance import Levenshtein
    except ImportError as e:
        sys.stderr.write(f"reference-scan: {e}; run scripts/bench-deps.sh\n")
        return 3

    t = time.perf_counter()
    with open(words_path, encoding="utf-8", errors="replace", newline="\n") as f:
        words = f.read().split("\n")
    if words and words[-1] == "":
        words.pop()
    with open(queries_path, encoding="utf-8", errors="replace", newline="\n") as f:
        queries = f.read().split("\n")
    if queries and queries[-1] == "":
        queries.pop()
    load_s = time.perf_counter() - t

    n = len(words)
    k = min(k, n)
    block = max(1, cells // max(n, 1))
    cdist_s = 0.0
    select_s = 0.0
    blocks = 0
    lines = []
    for start in range(0, len(queries), block):
        part = queries[start : start + block]
        t = time.perf_counter()
        d = process.cdist(part, words, scorer=Levenshtein.distance, workers=-1)
        cdist_s += time.perf_counter() - t
        t = time.perf_counter()
        # The k-th smallest distance of each row, then every index below it and the first
        # (lowest-index) ones equal to it: ties go by word index.
        kth = np.partition(d, k - 1, axis=1)[:, k - 1]
        for row, v in zip(d, kth):
            below = np.flatnonzero(row < v)
            below = below[np.lexsort((below, row[below]))]
            equal = np.flatnonzero(row == v)[: k - len(below)]
            idx = np.concatenate((below, equal))
            lines.append(" ".join(f"{i}:{row[i]}" for i in idx.tolist()))
        select_s += time.perf_counter() - t
        blocks += 1

    with open(out_path, "w", encoding="utf-8") as f:
        f.write(f"# load {load_s:.6f} cdist {cdist_s:.6f} select {select_s:.6f} blocks {blocks}\n")
        for line in lines:
            f.write(line + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
