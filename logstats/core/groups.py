"""Per-group sums over integer group codes, and the distinct keys of integer codes.

The one mechanism every grouped pass uses (log-moments, Shapiro-Wilk, the Box-Cox profile, the
presence of integer keys): :class:`GroupSums` sums row values into their groups and spreads group
values back to the rows. When the rows come in long runs of one group (tables written a condition, a
well, a plate at a time; values sorted within groups) each run is summed with ``np.add.reduceat`` and
only one number per run is scattered; otherwise every value is scattered with ``np.add.at``.
``np.add.at`` on sorted codes adds each value to the slot the previous one went to and waits for it
(about 2.6 ns a value here, against 0.3 ns for a contiguous reduction and 1.1 ns for codes in random
order).

:func:`occurring_keys` and :func:`unique_rows` are ``np.unique(..., return_inverse=True)`` for integer
keys in a known range, by marking which occur (linear time) instead of sorting.
"""

from __future__ import annotations

import numpy as np

__all__ = ["GroupSums", "find_runs", "occurring_keys", "scatter_sum", "unique_rows"]

#: ``np.add.at`` has had a fast unbuffered loop since numpy 1.25 and with numpy 2 beats ``np.bincount``
#: (about 1.3x per pass, measured with numpy 2.4); both add in element order, so the sums are the same
#: bit for bit.
_FAST_ADD_AT = np.lib.NumpyVersion(np.__version__) >= "2.0.0"

#: Inputs shorter than this always take the scatter path (finding runs would cost more than it saves).
RUNS_MIN = 4096
#: The run path is taken when the group codes change at most once every this many values on average.
RUN_LENGTH_MIN = 4


def scatter_sum(idx: np.ndarray, size: int, weights: np.ndarray | None = None) -> np.ndarray:
    """Per-index sums of ``weights`` (counts, as intp, without), in element order; ``idx`` in
    ``0 .. size-1``."""
    if not _FAST_ADD_AT:
        out = np.bincount(idx, weights=weights, minlength=size)
        return out if weights is not None else out.astype(np.intp)
    if weights is None:
        out = np.zeros(size, dtype=np.intp)
        np.add.at(out, idx, 1)
    else:
        out = np.zeros(size, dtype=np.float64)
        np.add.at(out, idx, weights)
    return out


def find_runs(slot: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
    """Starts and lengths of the runs of equal codes in ``slot`` when they are long (at least
    :data:`RUN_LENGTH_MIN` values on average, in an input of at least :data:`RUNS_MIN`), else None."""
    N = slot.size
    if N < RUNS_MIN:
        return None
    change = slot[1:] != slot[:-1]
    if (int(np.count_nonzero(change)) + 1) * RUN_LENGTH_MIN > N:
        return None
    starts = np.flatnonzero(change)
    starts += 1
    starts = np.concatenate([np.zeros(1, dtype=starts.dtype), starts])
    return starts, np.diff(starts, append=N)


class GroupSums:
    """Sums of row values per group, and group values spread to the rows, for rows labelled by group
    codes ``slot`` (every code in ``0 .. size-1``). ``counts`` holds the rows per group.

    ``runs`` says which path was chosen (see the module docstring); the numbers agree to rounding.
    """

    def __init__(self, slot: np.ndarray, size: int) -> None:
        self.slot, self.size = np.asarray(slot), int(size)
        found = find_runs(self.slot)
        self.runs = found is not None
        if found is not None:
            self.starts, self.lengths = found
            self.run_slot = self.slot[self.starts]
            self.counts = np.zeros(self.size, dtype=np.intp)
            np.add.at(self.counts, self.run_slot, self.lengths)
        else:
            self.counts = scatter_sum(self.slot, self.size)

    def sum(self, w: np.ndarray) -> np.ndarray:
        """``np.bincount(slot, weights=w, minlength=size)``."""
        if self.runs:
            return scatter_sum(self.run_slot, self.size, np.add.reduceat(w, self.starts))
        return scatter_sum(self.slot, self.size, w)

    def spread(self, v: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        """``v[slot]`` (into ``out`` when given, which must hold ``len(slot)`` floats)."""
        if out is not None:
            return np.take(v, self.slot, out=out[: self.slot.size], mode="clip")  # slots are in range
        if self.runs:
            return np.repeat(v[self.run_slot], self.lengths)
        return np.take(v, self.slot)


def occurring_keys(key: np.ndarray, space: int) -> tuple[np.ndarray, np.ndarray]:
    """``np.unique(key, return_inverse=True)`` (inverse as intp) for integer keys in ``0 .. space-1``:
    by marking which keys occur (linear time) when the key space is not much larger than the data, else
    by numpy's sort."""
    key = np.asarray(key)
    if key.size and space <= max(4 * key.size, 1 << 16) and key.min() >= 0 and key.max() < space:
        present = np.zeros(int(space), dtype=bool)
        present[key] = True
        lookup = np.cumsum(present, dtype=np.intp)
        lookup -= 1
        return np.flatnonzero(present).astype(np.int64), lookup[key]
    uniq, inv = np.unique(key, return_inverse=True)
    return uniq, inv.ravel().astype(np.intp)


def unique_rows(rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``np.unique(rows, axis=0, return_inverse=True)`` for non-negative integer rows: the columns are
    packed into one int64 key (mixed radix) and :func:`occurring_keys` finds the distinct keys, which is
    faster than numpy's row sort; the same rows, in the same (lexicographic) order."""
    rows = np.asarray(rows, dtype=np.int64)
    if rows.size == 0 or rows.ndim != 2:
        uniq, inv = np.unique(rows, axis=0, return_inverse=True)
        return uniq, inv.ravel().astype(np.intp)
    widths = rows.max(axis=0) + 1
    space = 1
    for w in widths.tolist():
        space *= int(w)
    if space >= 2**62 or rows.min() < 0:
        uniq, inv = np.unique(rows, axis=0, return_inverse=True)
        return uniq, inv.ravel().astype(np.intp)
    key = rows[:, 0].copy()
    for c in range(1, rows.shape[1]):
        key *= widths[c]
        key += rows[:, c]
    ukeys, inv = occurring_keys(key, space)
    uniq = np.empty((ukeys.size, rows.shape[1]), dtype=np.int64)
    rest = ukeys.copy()
    for c in range(rows.shape[1] - 1, -1, -1):
        uniq[:, c] = rest % widths[c]
        rest //= widths[c]
    return uniq, inv
