"""`bandwatch reprocess`: every stored run again with today's analysis, here or on a cluster.

selection (which files, streamed) -> plan (skip or analyse, and why) -> a backend (`local`: the
station's worker pool; `cluster`: Dask) -> job (records each outcome as a new version; one
writer) -> summary and `changes` (what moved, per quantity).
"""
