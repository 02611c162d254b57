#!/usr/bin/env python3
"""Scores the output of `waymark pairs` or `waymark groups` against a truth file.

    scripts/score-dedup.py OUTPUT.jsonl TRUTH.csv [--id-column code] [--entity-column firm]

OUTPUT.jsonl is JSON Lines as `pairs --within` writes it ({"a": {"id": ..}, "b": {"id": ..}, ..})
or as `groups` writes it ({"group": .., "ids": [..], ..}). TRUTH.csv has a header and one row
per id, with the entity the id belongs to (demo-data/traders-truth.csv: code,firm,kind).

Counted over unordered pairs of ids: a pair is claimed when the output pairs it (groups: when
both ids are in one group) and true when both ids belong to one entity. Prints the claimed and
true pairs, precision (true claimed / claimed) and recall (true claimed / true). Ids absent from
the truth file are an error. Python standard library only.
"""

import argparse
import csv
import itertools
import json
import sys


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("output")
    ap.add_argument("truth")
    ap.add_argument("--id-column", default="code")
    ap.add_argument("--entity-column", default="firm")
    args = ap.parse_args()

    entity = {}
    with open(args.truth, newline="", encoding="utf-8") as f:
        for row in csv.DictReader(f):
            entity[str(row[args.id_column])] = row[args.entity_column]
    members = {}
    for id_, e in entity.items():
        members.setdefault(e, []).append(id_)
    true_pairs = sum(len(m) * (len(m) - 1) // 2 for m in members.values())

    claimed = set()
    with open(args.output, encoding="utf-8") as f:
        for n, line in enumerate(f, 1):
            if not line.strip():
                continue
            rec = json.loads(line)
            if "ids" in rec:
                ids = [str(i) for i in rec["ids"]]
            elif "a" in rec and "b" in rec:
                ids = [str(rec["a"]["id"]), str(rec["b"]["id"])]
            else:
                sys.exit(f"{args.output}:{n}: neither a pair nor a group")
            for i in ids:
                if i not in entity:
                    sys.exit(f"{args.output}:{n}: id {i} is not in {args.truth}")
            for a, b in itertools.combinations(sorted(ids), 2):
                claimed.add((a, b))
    right = sum(1 for a, b in claimed if entity[a] == entity[b])
    precision = right / len(claimed) if claimed else float("nan")
    recall = right / true_pairs if true_pairs else float("nan")
    print(f"claimed pairs {len(claimed)}, right {right}, true pairs {true_pairs}: "
          f"precision {precision:.3f}, recall {recall:.3f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
