"""Shared fixtures."""

from __future__ import annotations

import pytest

from bench.config import builtin_bench_path


@pytest.fixture
def demo_text() -> str:
    """The built-in simulated bench file's text."""
    return builtin_bench_path().read_text(encoding="utf-8")
