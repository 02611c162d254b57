"""waymark on Apache Spark: jobs over DataFrames, run by Spark itself (``pyspark`` from PyPI).

This part of the package needs ``pyspark`` (``pip install pyspark``; Spark 4 needs Java 17 or
later). Importing ``waymark`` does not import it; importing ``waymark.spark`` does.

- :func:`connected_components`: the groups of an edge list (pairs of ids), computed in Spark
  by alternating large-star and small-star rounds, never collected onto the driver;
- :func:`groups`: the groups of near-duplicates that a DataFrame of pairs makes, by the rules
  of ``waymark groups`` (``centre``, ``clique``, ``components``), with the same answers;
- :func:`build`: a sharded build, references chosen once on the driver, one part of an
  index in parts built per partition on the executors;
- :func:`query`: bulk queries, every block of queries against every part of an index,
  merged per query in Spark (exact and range answers exact);
- :func:`pairs`: every pair within a radius across every part of an index (deduplication),
  the pairs of ``waymark pairs --within R``.

The Python workers that Spark starts must import ``waymark`` too: on a cluster, install the
package on every executor; in local mode, point ``PYSPARK_PYTHON`` at the interpreter that has
it (for example ``sys.executable``).
"""

try:
    import pyspark  # noqa: F401
except ImportError as err:  # pragma: no cover - depends on the environment
    raise ImportError(
        "waymark.spark needs pyspark: pip install pyspark (and Java 17 or later on the machine)"
    ) from err

from .components import connected_components
from .grouping import groups
from .self_join import pairs
from .bulk_query import query
from .sharded_build import build

__all__ = ["build", "connected_components", "groups", "pairs", "query"]
