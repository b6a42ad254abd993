"""Animations: frame timing, resumable batches, manifests, worker pools, Dask farms, flash check, video."""
