#!/usr/bin/env python3
"""A metric program for waymark, in pure Python (protocol "waymark-metric", version 1).

Reads requests on stdin, one JSON object per line:
    {"query": "Orvane Quay", "items": ["Orvane Kay", "Keth Landing"]}
and answers each with one line:
    {"distances": [2, 9]}
after first announcing itself with the hello line
    {"protocol": "waymark-metric", "version": 1}

Usage: metric_server.py [--metric levenshtein|length]
  levenshtein  unit-cost edit distance over Unicode characters (default)
  length       |len(query) - len(item)|: a trivial pseudometric, for timing the protocol

Test hooks (to check waymark's error handling): --misbehave exit|hang|garbage|count
makes the program fail in that way on its first request.
"""

import json
import sys
import time


def levenshtein(a, b):
    """Unit-cost edit distance, the textbook dynamic program (one row at a time)."""
    if len(a) < len(b):
        a, b = b, a
    prev = list(range(len(b) + 1))
    for i, ca in enumerate(a, 1):
        cur = [i]
        for j, cb in enumerate(b, 1):
            cur.append(min(prev[j] + 1, cur[j - 1] + 1, prev[j - 1] + (ca != cb)))
        prev = cur
    return prev[-1]


def main(argv):
    metric = "levenshtein"
    misbehave = None
    args = list(argv)
    while args:
        a = args.pop(0)
        if a == "--metric" and args:
            metric = args.pop(0)
        elif a == "--misbehave" and args:
            misbehave = args.pop(0)
        else:
            print(f"metric_server.py: unknown argument {a!r}", file=sys.stderr)
            return 2
    if metric == "levenshtein":
        dist = levenshtein
    elif metric == "length":
        dist = lambda q, x: abs(len(q) - len(x))  # noqa: E731
    else:
        print(f"metric_server.py: unknown metric {metric!r}", file=sys.stderr)
        return 2

    out = sys.stdout
    out.write(json.dumps({"protocol": "waymark-metric", "version": 1, "name": metric}) + "\n")
    out.flush()
    for line in sys.stdin:
        try:
            req = json.loads(line)
            query, items = req["query"], req["items"]
        except (ValueError, KeyError, TypeError) as e:
            out.write(json.dumps({"error": f"bad request: {e}"}) + "\n")
            out.flush()
            continue
        if misbehave == "exit":
            print("metric_server.py: exiting on purpose", file=sys.stderr)
            return 3
        if misbehave == "hang":
            time.sleep(3600)
        if misbehave == "garbage":
            out.write("this is not json\n")
            out.flush()
            continue
        d = [dist(query, x) for x in items]
        if misbehave == "count":
            d = d[:-1]
        out.write(json.dumps({"distances": d}) + "\n")
        out.flush()
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
