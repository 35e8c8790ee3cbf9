"""The benchmarks are plain scripts (``python tests/benchmarks/bench_NAME.py``), not tests."""

collect_ignore_glob = ["*.py"]
