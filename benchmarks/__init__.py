"""Benchmark harness: generated models at increasing size; see docs/benchmarks.md."""
