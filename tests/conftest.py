import os

os.environ.setdefault("POLARS_MAX_THREADS", "2")
