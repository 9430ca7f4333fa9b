"""Batch forecasting: one model per group of a long table, run on dask.distributed.

``table`` (long table -> groups, validation) -> ``worker`` (the per-chunk task: fit and
forecast each group from its own seed) -> ``runner`` (cluster connection, submission,
retries, progress) -> ``output`` (forecast and status tables, Parquet or CSV). ``job``
runs a batch for the HTTP service's job runner; ``schemas`` holds its request body.
"""
