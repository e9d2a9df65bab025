"""The benchmark is run by hand (tests/perf/run.py), never by pytest: it takes minutes,
starts servers and measures time, which the default test run must not do."""

collect_ignore_glob = ["*"]
