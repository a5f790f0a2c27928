"""Benchmark scripts of instantonkit; each module exposes ``run(quick) -> list of row dicts`` and prints a table when run."""
