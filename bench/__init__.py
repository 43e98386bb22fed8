"""The benchmarks: ``python bench/run.py`` runs them all, each module as
``python -m bench.bench_x`` from the repository's folder."""
