"""The netprobe benchmark suite: every figure a ratio measured in one run (see benchmarks/README.md)."""
