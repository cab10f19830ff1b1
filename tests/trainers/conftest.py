"""Fixtures shared by the training-core tests."""

from __future__ import annotations

import pytest
from threadpoolctl import threadpool_limits


@pytest.fixture
def one_blas_thread():
    """Run on one BLAS thread, as the sweep's workers do: small products are fastest there, and the bits of a
    result depend on the thread count (same seed and thread count give identical results)."""
    with threadpool_limits(limits=1):
        yield
