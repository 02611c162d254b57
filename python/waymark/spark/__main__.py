"""``python -m waymark.spark``: the Spark jobs from the command line, for ``spark-submit``.

    python -m waymark.spark build  --input names.csv --column name --id-column code --index /shared/names.wmk
    python -m waymark.spark query  --index /shared/names.wmk --input lookups.txt -k 5 --out /shared/answers
    python -m waymark.spark pairs  --index /shared/names.wmk --within 2 --out /shared/pairs
    python -m waymark.spark groups --index /shared/names.wmk --within 2 --out /shared/groups

Input is CSV with a header line (``--input-format csv``, the default for ``.csv`` files) or
text, one item per line (``text``, the default otherwise; its column is ``item``). Output
is a folder of CSV (with a header) or Parquet files, as Spark writes them; an existing
``--out`` is refused, never overwritten. ``--master`` is left to ``spark-submit`` (or
local mode with every core) unless given. Exit codes: 0 done, 2 bad arguments or input,
1 a failed Spark job.
"""

from __future__ import annotations

import argparse
import math
import os
import sys


def _radius(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not math.isfinite(value) or value < 0:
        raise argparse.ArgumentTypeError(f"{text!r}: a radius is a finite number of at least 0")
    return value


def _count(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"{text!r}: must be at least 1")
    return value


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="python -m waymark.spark",
        description="waymark's jobs on Apache Spark: a sharded build, bulk queries, pairs within a radius, groups.",
    )
    sub = p.add_subparsers(dest="command", required=True)

    def common(s, index_help):
        s.add_argument("--master", help="Spark master URL (default: spark-submit's, else local[*])")
        s.add_argument("--index", required=True, help=index_help)

    def source(s, required):
        s.add_argument("--input", required=required, help="CSV (header line) or text file, or a folder of them")
        s.add_argument("--input-format", choices=["csv", "text"], help="default: csv for .csv, else text")
        s.add_argument("--column", default=None, help="the items' (or queries') column (text input: item)")
        s.add_argument("--id-column", default=None, help="the ids' column (default: 0-based positions)")

    def sink(s):
        s.add_argument("--out", required=True, help="output folder (refused if it exists)")
        s.add_argument("--format", choices=["csv", "parquet"], default="csv", dest="out_format")

    b = sub.add_parser("build", help="build an index in parts in Spark")
    common(b, "the index to write (its list file; parts go to INDEX.parts/, on storage every executor reads)")
    source(b, True)
    b.add_argument("--shards", type=_count, help="parts to build (default: the input's partitions)")
    b.add_argument("--sample", type=_count, default=4096, help="items drawn for the references (default 4096)")
    b.add_argument("--metric", default="levenshtein")
    b.add_argument("--dim", type=int, default=64)
    b.add_argument("--seed", type=int, default=0)
    b.add_argument("--small-radius", type=int, choices=[1, 2], help="also store the deletion-variant table")
    for flag in ("fold-case", "trim", "fold-punct", "sort-tokens"):
        b.add_argument(f"--{flag}", action="store_true")

    q = sub.add_parser("query", help="the neighbours of every query")
    common(q, "the index (a list file or one index file)")
    source(q, True)
    sink(q)
    q.add_argument("-k", type=_count, default=10, help="neighbours per query (default 10)")
    q.add_argument("--exact", action="store_true", help="the exact k nearest")
    q.add_argument("--within", type=_radius, help="only neighbours at distance at most R (exact)")

    for name, what in (("pairs", "every pair within a radius (deduplication)"), ("groups", "groups of near-duplicates")):
        s = sub.add_parser(name, help=what)
        common(s, "the index (a list file or one index file)")
        sink(s)
        s.add_argument("--within", type=_radius, required=True, help="the radius R")
        if name == "groups":
            s.add_argument("--grouping", choices=["centre", "clique", "components"], default="centre")
    return p


def _read(spark, args):
    fmt = args.input_format or ("csv" if args.input.lower().endswith(".csv") else "text")
    if fmt == "csv":
        df = spark.read.csv(args.input, header=True, inferSchema=False, multiLine=True, escape='"')
        column = args.column
        if column is None:
            raise ValueError("--column is needed for CSV input")
    else:
        if args.column not in (None, "item"):
            raise ValueError("text input has one column, item: leave --column out")
        if args.id_column is not None:
            raise ValueError("text input has no id column: leave --id-column out")
        df = spark.read.text(args.input).withColumnRenamed("value", "item")
        column = "item"
    if args.id_column is not None and args.id_column in df.columns:
        from pyspark.sql import functions as F

        # CSV fields are text: integer ids are read as integers when every one is one.
        as_long = F.expr("try_cast(`{}` AS BIGINT)".format(args.id_column.replace("`", "``")))
        cast = df.select(F.col(args.id_column).alias("text"), as_long.alias("x"))
        if cast.where(F.col("x").isNull() & F.col("text").isNotNull()).limit(1).count() == 0:
            df = df.withColumn(args.id_column, as_long)
    return df, column


def _write(df, args):
    writer = df.write.mode("errorifexists")
    if args.out_format == "csv":
        writer.csv(args.out, header=True)
    else:
        writer.parquet(args.out)


def main(argv=None) -> int:
    args = _parser().parse_args(argv)
    if getattr(args, "out", None) is not None and os.path.exists(args.out):
        print(f"waymark.spark: {args.out}: the output folder exists; give a new one", file=sys.stderr)
        return 2
    if getattr(args, "input", None) is not None and not os.path.exists(args.input):
        print(f"waymark.spark: {args.input}: no such file or folder", file=sys.stderr)
        return 2

    from pyspark.sql import SparkSession
    from pyspark.sql import functions as F

    from waymark.spark import build, groups, pairs, query

    builder = SparkSession.builder.appName(f"waymark {args.command}")
    if args.master:
        builder = builder.master(args.master)
    spark = builder.getOrCreate()
    spark.sparkContext.setLogLevel("WARN")
    try:
        if args.command == "build":
            df, column = _read(spark, args)
            options = {"metric": args.metric, "dim": args.dim}
            if args.small_radius:
                options["small_radius"] = args.small_radius
            for flag in ("fold_case", "trim", "fold_punct", "sort_tokens"):
                if getattr(args, flag):
                    options[flag] = True
            path = build(
                spark, df, column, args.index, args.id_column, shards=args.shards, sample=args.sample,
                seed=args.seed, **options,
            )
            print(path)
        elif args.command == "query":
            df, column = _read(spark, args)
            _write(query(spark, args.index, df, column, args.id_column, k=args.k, exact=args.exact, within=args.within), args)
        elif args.command == "pairs":
            _write(pairs(spark, args.index, within=args.within), args)
        else:
            found = pairs(spark, args.index, within=args.within).cache()
            labelled = groups(found, "number_a", "number_b", grouping=args.grouping)
            names = found.select(F.col("number_a").alias("node"), F.col("id_a").alias("id"), F.col("item_a").alias("item")).union(
                found.select(F.col("number_b").alias("node"), F.col("id_b").alias("id"), F.col("item_b").alias("item"))
            ).distinct()
            out = labelled.join(names, "node").select("node", "id", "item", "group", "centre")
            _write(out, args)
    except ValueError as err:
        print(f"waymark.spark: {err}", file=sys.stderr)
        return 2
    except Exception as err:  # a failed job: Spark's message, without the JVM's trace
        from pyspark.errors import PySparkException
        from py4j.protocol import Py4JJavaError

        if isinstance(err, (PySparkException, Py4JJavaError)):
            first = str(err).strip().splitlines()[0] if str(err).strip() else type(err).__name__
            print(f"waymark.spark {args.command}: the Spark job failed: {first}", file=sys.stderr)
            return 1
        if type(err).__module__.startswith("waymark"):
            print(f"waymark.spark {args.command}: {err}", file=sys.stderr)
            return 2
        raise
    finally:
        spark.stop()
    return 0


if __name__ == "__main__":
    sys.exit(main())
