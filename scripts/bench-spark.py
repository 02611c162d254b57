"""Deduplication on Spark against one machine: all pairs within 2 of an invented register
(python/tests/invented.py, 100,000 names by default), by

- one machine: `waymark pairs whole.wmk --within 2` on one index of every name (its JSON
  Lines written to a file);
- Spark in local mode (local[2]): `waymark.spark.pairs(index, within=2)` over an index of
  SHARDS parts (consecutive slices of the names: `waymark.spark.build` when the package has
  the sharded build, else one ordinary index file per slice), written as CSV.

The builds are not timed (build excluded on both sides), nor the Spark session's start. Both
indexes are built with `--small-radius 2` (the deletion-variant table, through which range
queries within 2 go; `waymark pairs --within 2` builds one in memory when the index has
none). Each side runs ROUNDS times, alternating; medians. The pairs are checked to be the same
set.

Run after scripts/test-data.sh and scripts/test-python.sh:

    .venv-test/bin/python scripts/bench-spark.py [N] [ROUNDS] [SHARDS]
"""

import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO / "python" / "tests"))
from invented import register  # noqa: E402


def main():
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 100_000
    rounds = int(sys.argv[2]) if len(sys.argv) > 2 else 3
    shards = int(sys.argv[3]) if len(sys.argv) > 3 else 4
    binary = os.environ.get("WAYMARK_BIN", str(REPO / "target" / "release" / "waymark"))
    os.environ["PYSPARK_PYTHON"] = sys.executable

    from pyspark.sql import SparkSession

    import waymark
    import waymark.spark as ws

    work = Path(tempfile.mkdtemp(prefix="bench-spark-"))
    names = register(n)
    text = work / "names.txt"
    text.write_text("\n".join(names) + "\n", encoding="utf-8")
    spark = (
        SparkSession.builder.master("local[2]")
        .appName("waymark-bench")
        .config("spark.sql.shuffle.partitions", "2")
        .config("spark.ui.enabled", "false")
        .getOrCreate()
    )
    spark.sparkContext.setLogLevel("ERROR")
    df = spark.createDataFrame([(t,) for t in names], "name string").cache()
    df.count()

    subprocess.run([binary, "build", text, "-o", work / "whole.wmk", "-q", "--small-radius", "2"], check=True)
    if hasattr(waymark, "build_shard"):
        index = ws.build(spark, df, "name", work / "names.wmk", shards=shards, small_radius=2)
        how = "waymark.spark.build"
    else:
        index, step = [], -(-n // shards)
        for s, start in enumerate(range(0, n, step)):
            chunk = names[start : start + step]
            index.append(str(work / f"slice-{s}.wmk"))
            waymark.build(chunk, index[-1], ids=list(range(start, start + len(chunk))), small_radius=2)
        how = "one index file per slice"

    times = {"one machine": [], "spark": []}
    for r in range(rounds):
        t0 = time.perf_counter()
        with open(work / f"pairs-{r}.jsonl", "w") as out:
            subprocess.run([binary, "pairs", work / "whole.wmk", "--within", "2"], check=True, stdout=out)
        t1 = time.perf_counter()
        ws.pairs(spark, index, within=2).write.csv(str(work / f"spark-{r}"), header=True)
        t2 = time.perf_counter()
        times["one machine"].append(t1 - t0)
        times["spark"].append(t2 - t1)
        if r == 0:
            with open(work / "pairs-0.jsonl") as f:
                one = sorted((p["a"]["id"], p["b"]["id"], float(p["distance"])) for p in map(json.loads, f))
            got = spark.read.csv(str(work / "spark-0"), header=True).collect()
            theirs = sorted((int(g.id_a), int(g.id_b), float(g.distance)) for g in got)
            print(f"pairs within 2: {len(one)} (one machine), {len(theirs)} (Spark); same: {one == theirs}")
            if one != theirs:
                sys.exit("the pairs differ")
        print(f"round {r + 1}: one machine {times['one machine'][-1]:.2f} s, Spark {times['spark'][-1]:.2f} s "
              f"({times['spark'][-1] / times['one machine'][-1]:.2f}x)", flush=True)
    spark.stop()
    shutil.rmtree(work)

    a, b = statistics.median(times["one machine"]), statistics.median(times["spark"])
    print(f"\n{n:,} names; Spark: local[2], {shards} parts ({how}); medians of {rounds} rounds; builds not timed")
    print("| pairs within 2 | one machine | Spark local[2] | ratio |")
    print("|---|---:|---:|---:|")
    print(f"| wall time | {a:.2f} s | {b:.2f} s | {b / a:.2f}x |")


if __name__ == "__main__":
    main()
