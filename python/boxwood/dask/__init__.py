"""Range trees on Dask's distributed scheduler: sharded by x across the workers, or broadcast.

>>> import numpy as np, pandas as pd, dask.dataframe as dd
>>> import boxwood.dask
>>> trips = pd.DataFrame({"start": np.arange(100.0), "minutes": np.arange(100) % 30})
>>> points = dd.from_pandas(trips, npartitions=4)
>>> sharded = boxwood.dask.ShardedTree.from_frame(points, x="start", y="minutes", shards=3,
...                                               client=client)
>>> sharded.num_shards
3
>>> boxes = pd.DataFrame({"x_lo": [0, 10], "x_hi": [50, 90], "y_lo": [0, 5], "y_hi": [9, 5]})
>>> sharded.count_boxes(boxes).tolist()
[20, 2]
>>> sharded.count_boxes(dd.from_pandas(boxes, npartitions=2)).compute().tolist()
[20, 2]

A :class:`ShardedTree` splits the points of a Dask DataFrame into half-open x intervals
(shards) at quantiles of x, builds one :class:`boxwood.RangeTree` per shard on the workers
and keeps it there as a Dask future. Each box is sent only to the shards whose x interval
its x range overlaps; counts and sums add up, reported rows and joined rows are
concatenated. :func:`broadcast` instead copies one small tree to every worker and answers a
Dask DataFrame of boxes partition by partition. Work runs as ordinary Dask tasks (named
``boxwood-...``): follow it with ``distributed.progress``, ``progress=True`` or the
dashboard, and a lost worker's tasks are rerun by Dask from their inputs.

Dask is optional: ``pip install 'boxwood[dask]'``; ``import boxwood`` never imports it.

The package's modules, one concern each: ``_routing`` (shard boundaries, which boxes go to
which shard), ``_tasks`` (what the workers run), ``_files`` (shard files and the manifest),
``_sharded`` (:class:`ShardedTree`), ``_broadcast`` (:class:`BroadcastTree`) and
``_common`` (the client, task names).
"""

from __future__ import annotations

try:
    import dask.dataframe  # noqa: F401
    import distributed  # noqa: F401
except ImportError as _exc:
    raise ImportError(
        "boxwood.dask needs Dask's distributed scheduler; install it with "
        "pip install 'boxwood[dask]'"
    ) from _exc

from ._broadcast import BroadcastTree, broadcast
from ._files import MANIFEST_NAME, MANIFEST_VERSION
from ._sharded import ShardedTree

__all__ = ["MANIFEST_NAME", "MANIFEST_VERSION", "BroadcastTree", "ShardedTree", "broadcast"]
