"""Groups of near-duplicates from a DataFrame of pairs, in Spark, by the rules of
``waymark groups``."""

from __future__ import annotations

from pyspark.sql import DataFrame
from pyspark.sql import functions as F
from pyspark.sql.types import IntegralType

from .components import connected_components

_GROUPINGS = ("centre", "clique", "components")


def groups(
    pairs: DataFrame,
    a: str = "a",
    b: str = "b",
    distance: str = "distance",
    *,
    grouping: str = "centre",
) -> DataFrame:
    """The groups that ``pairs`` make, as ``waymark groups`` makes them on one machine.

    ``pairs`` holds one pair per row: two integer labels (item numbers or integer ids) in the
    columns ``a`` and ``b`` and their distance in ``distance``. ``grouping`` is one of
    ``centre`` (default: every member within the pairs' radius of its group's centre, the
    guard against chaining), ``clique`` (every two members paired) or ``components`` (chains
    included).

    The connected components are computed in Spark (:func:`connected_components`). No rule
    lets a group cross a component, so ``centre`` and ``clique`` then run, per component and
    on an executor, the very code of ``waymark groups`` (:func:`waymark.group_pairs`); the
    groups are therefore the command's, label for label. A component is held by one task: a
    chained component of many millions of labels needs an executor with the memory for its
    pairs.

    Returns a DataFrame of ``node``, ``group`` (the group's smallest member) and ``centre``
    (under ``centre``, else null), one row per grouped label; labels in no pair with another
    label are not listed.
    """
    if grouping not in _GROUPINGS:
        raise ValueError(f"groups: unknown grouping {grouping!r}: use centre, clique or components")
    for name in (a, b, distance):
        if name not in pairs.columns:
            raise ValueError(f"groups: the pairs have no column {name!r} (columns: {pairs.columns})")
    for name in (a, b):
        if not isinstance(pairs.schema[name].dataType, IntegralType):
            raise ValueError(
                f"groups: column {name!r} is {pairs.schema[name].dataType.simpleString()}: "
                "labels must be integers (item numbers or integer ids)"
            )
    edges = pairs.select(
        F.col(a).cast("long").alias("a"),
        F.col(b).cast("long").alias("b"),
        F.col(distance).cast("double").alias("distance"),
    ).where(F.col("a") != F.col("b"))
    components = connected_components(edges, "a", "b")
    if grouping == "components":
        return components.select(
            "node", F.col("component").alias("group"), F.lit(None).cast("long").alias("centre")
        )

    tagged = edges.join(components.withColumnRenamed("node", "a"), "a")
    rule = grouping

    def groups_of(component):
        # Runs on an executor: the package must be installed there.
        import waymark

        _, rows = component
        rows = list(rows)
        found = waymark.group_pairs(
            [r[0] for r in rows], [r[1] for r in rows], [r[2] for r in rows], grouping=rule
        )
        for members, centre in found:
            for m in members:
                yield (m, members[0], centre)

    keyed = tagged.rdd.map(lambda r: (r["component"], (r["a"], r["b"], r["distance"])))
    out = keyed.groupByKey().flatMap(groups_of)
    return pairs.sparkSession.createDataFrame(out, "node long, group long, centre long")
