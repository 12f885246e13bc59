"""Engines: drive key batches through hash kernels into accumulators."""
