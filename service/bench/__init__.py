"""Benchmarks: invented inputs and timing harnesses. They measure speed, never correctness."""
