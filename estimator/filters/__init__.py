"""The filters: settings, kernel tables, compiled kernels, EKF, coulomb baseline, UKF, RTS smoother,
trace and energy-based SOC.  Entry point: :func:`socfuse.estimator.filters.run.estimate`."""
