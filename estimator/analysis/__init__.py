"""Analysis around the filters: fault scenarios, metrics, tuning, consistency (NEES/NIS), the
posterior Cramer-Rao bound, Monte Carlo tolerance study and the benchmark harness."""
