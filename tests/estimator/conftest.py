"""Fixtures the estimator tests share: the built-in demo bench and its estimator parameters."""

from __future__ import annotations

import pytest

from bench.config import load_bench
from bench.estimator import EstimatorParams


@pytest.fixture(scope="module")
def cfg():
    """The built-in simulated demo bench."""
    return load_bench()


@pytest.fixture(scope="module")
def params(cfg):
    """The estimator's parameters for that bench, as `record` derives them."""
    return EstimatorParams.from_config(cfg)
