"""Test helper: fail when dask computes inside a block that must only build a graph.

Dask runs every ``compute()`` (and ``persist()``) through the scheduler named in ``dask.config``.
:func:`raise_if_dask_computes` installs a scheduler that counts those calls, runs the permitted ones
synchronously, and raises as soon as the count goes past ``max_computes``; so a method that claims to
be lazy cannot quietly compute its input while building the result. (The pattern follows the helper
in flox's test suite; the code is our own.)
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterator
from typing import Any


class DaskComputed(AssertionError):
    """Raised when dask computed more often than a test allows."""


class CountingScheduler:
    """A dask scheduler that counts its calls and refuses more than ``max_computes`` of them."""

    def __init__(self, max_computes: int = 0) -> None:
        self.max_computes = max_computes
        self.calls = 0

    def __call__(self, dsk: Any, keys: Any, **kwargs: Any) -> Any:
        self.calls += 1
        if self.calls > self.max_computes:
            raise DaskComputed(
                f"dask computed {self.calls} time(s) inside a block that allows {self.max_computes}"
            )
        import dask

        return dask.get(dsk, keys, **kwargs)


@contextlib.contextmanager
def raise_if_dask_computes(max_computes: int = 0) -> Iterator[CountingScheduler]:
    """Run the block with a scheduler that raises :class:`DaskComputed` past ``max_computes`` computes.

    Yields the scheduler, whose ``calls`` attribute tells how many computes happened.

    Examples
    --------
    >>> import dask.array as da
    >>> x = da.ones(10, chunks=5)
    >>> with raise_if_dask_computes():
    ...     y = x + 1            # building a graph is fine
    >>> with raise_if_dask_computes(max_computes=1) as sched:
    ...     _ = y.sum().compute()
    >>> sched.calls
    1
    """
    import dask

    scheduler = CountingScheduler(max_computes)
    with dask.config.set(scheduler=scheduler):
        yield scheduler
