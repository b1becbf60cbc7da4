"""Shared test fixtures: back-end parametrisation and the dask "must stay lazy" guard."""

from __future__ import annotations

import contextlib
import importlib.util
import os

import numpy as np
import pytest
from hypothesis import settings

# CI runs the property tests on a fixed sequence of examples, so a landing never depends on luck;
# locally they explore fresh examples each run (HYPOTHESIS_PROFILE=ci reproduces CI).
settings.register_profile("ci", derandomize=True, print_blob=True)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "ci" if os.environ.get("CI") else "default"))

HAS_DASK = importlib.util.find_spec("dask") is not None
requires_dask = pytest.mark.skipif(not HAS_DASK, reason="dask is not installed")

BACKENDS = ["numpy", pytest.param("dask", marks=requires_dask)]


@contextlib.contextmanager
def no_dask_compute():
    """Fail if anything inside the block makes dask compute (graph building must stay lazy)."""
    import dask

    def refuse(*args, **kwargs):
        raise AssertionError("dask computed inside a block that must stay lazy")

    with dask.config.set(scheduler=refuse):
        yield


def as_backend(arr: np.ndarray, backend: str, chunks=None):
    if backend == "dask":
        import dask.array as da

        return da.from_array(arr, chunks=chunks or tuple(max(1, s // 3) for s in arr.shape))
    return arr
