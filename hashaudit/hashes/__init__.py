"""Hash functions: the registry and its batch kernels."""
