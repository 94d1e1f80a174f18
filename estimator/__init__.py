"""socfuse.estimator: what the BMS believes.

Coulomb counting with OCV reseed (the baseline), the EKF on compiled kernels, a sigma-point
filter through filterpy, an RTS smoother, noise tuning, consistency tests, the posterior
Cramer-Rao bound, energy-based SOC, the benchmark harness, reports, C export and the CLI.
"""
if __name__ == "estimator":  # imported as a bare top-level name from a source checkout
    raise ImportError("socfuse's estimator/ folder is the package socfuse.estimator; use `import socfuse.estimator`")
