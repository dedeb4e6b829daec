"""The online estimator: state in, state out (no I/O): parameters, timing, the estimate."""
