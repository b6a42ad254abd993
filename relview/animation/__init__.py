"""Animations: frame times, resumable frame batches, worker pools, Dask farms, video."""
