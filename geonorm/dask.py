"""Cleaning tables too big for one machine, on a Dask cluster.

Needs the ``dask`` extra (``pip install 'geonorm[dask]'``) on the client and on
every worker, and the same place index everywhere::

    from distributed import Client
    import dask.dataframe as dd
    import geonorm.dask

    client = Client("tcp://scheduler:8786")
    people = dd.read_parquet("s3://bucket/people/")
    cleaned = geonorm.dask.clean_frame(people, "location", cache="run.sqlite")
    cleaned.to_parquet("s3://bucket/people_geo/")

``clean_frame`` counts the distinct strings on the cluster, answers them through
the same pipeline as ``geonorm clean`` (the cache stays with the client; only
the misses are resolved, on the workers) and returns the frame with the geo
columns appended, lazily. ``clean_dataset`` is ``geonorm clean --engine dask``:
read a Parquet or CSV dataset, write one Parquet file per partition.
"""

from __future__ import annotations

from .batch.dask_engine import DaskEngine, check_workers, clean_dataset, clean_frame, resolved_here

__all__ = ["DaskEngine", "check_workers", "clean_dataset", "clean_frame", "resolved_here"]
