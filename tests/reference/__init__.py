"""Independent high-precision references used by the test suite (no lyacomp imports here)."""
