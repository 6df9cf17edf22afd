"""Running the battery, the timer and ``count`` on a Dask cluster (optional extra ``cluster``)."""
