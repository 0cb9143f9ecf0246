"""``python -m ndrigid.compile``: compile and cache the kernels ahead of time."""
