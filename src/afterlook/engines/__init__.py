"""Where the training statistics are computed: in memory (default), in chunks, or on a Dask cluster."""

ENGINES = ("memory", "chunked", "dask")
