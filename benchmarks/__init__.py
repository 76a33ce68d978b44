"""rxlog's benchmarks: one ``bench_<area>.py`` per area, each with ``run()`` returning rows
(name, value, unit, target, ok) measured in one run. ``python -m benchmarks`` runs them all."""
