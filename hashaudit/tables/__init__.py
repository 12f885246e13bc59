"""Bucketing schemes: how a hash value becomes a bucket index."""
