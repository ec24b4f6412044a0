"""Output memory reused from call to call, once the caller has let go of it.

A render-farm run traces streamlines of about the same size at every frame, and each frame's arrays are
dropped once written. Fresh memory costs a page fault on the first write of every page, and on virtual
machines that cost is high: on the benchmark machine, writing a fresh 27 MB array took 30-40 ms, a warm one
2-3 ms (measured with ``benchmarks/steady.py``'s case). :class:`OutputPool` hands out views of buffers it
keeps, and a buffer is reused only when no view of it is alive any more: the caller's arrays are never
overwritten behind its back.
"""

from __future__ import annotations

import sys

import numpy as np

__all__ = ["OutputPool"]

#: Extra room a buffer is made with, so that a slightly longer output next time still fits.
SLACK = 0.25
#: Buffers kept per name: two, so that a loop like ``lines = trace(...)`` (which holds the previous frame's
#: arrays while it makes the next) still reuses memory.
KEEP = 2


class OutputPool:
    """Named output buffers, reused when free.

    ``empty(name, shape, dtype)`` returns an uninitialised array of that shape: a view of a buffer kept
    under ``name`` that is large enough and from which no array is still referenced anywhere (every NumPy
    view holds a reference to its buffer, and so does a VTK array made from it without a copy); otherwise
    a view of a new buffer, which takes the place of a free one that was too small, or of the oldest one
    (which lives on as long as its views do). Memory held: up to ``keep`` (default :data:`KEEP`) of the
    largest outputs asked for under each name, until the pool is dropped; no more buffers than callers
    once held at the same time.

    Examples
    --------
    >>> pool = OutputPool()
    >>> a = pool.empty("points", (4, 3))
    >>> b = pool.empty("points", (4, 3))  # a is alive: other memory
    >>> np.shares_memory(a, b)
    False
    >>> del a
    >>> pool.free("points")  # a buffer with nothing made from it alive: the next call reuses it
    True
    """

    def __init__(self) -> None:
        self._buffers: dict[str, list[np.ndarray]] = {}
        # the reference count of a buffer nothing else refers to, measured through the same code path as
        # the checks (no assumption about what the interpreter counts)
        self._buffers[""] = [np.empty(0)]
        self._alone = self._references("", 0)
        del self._buffers[""]

    def _references(self, name: str, i: int) -> int:
        return sys.getrefcount(self._buffers[name][i])

    def _free(self, name: str) -> list[int]:
        return [i for i in range(len(self._buffers.get(name, ()))) if self._references(name, i) <= self._alone]

    def free(self, name: str) -> bool:
        """Whether a buffer is kept under ``name`` from which no array is alive."""
        return bool(self._free(name))

    def empty(self, name: str, shape: int | tuple[int, ...], dtype: np.dtype | type = np.float64,
              keep: int = KEEP) -> np.ndarray:
        """An uninitialised array (see the class notes): a view of the smallest free buffer of ``name`` that
        holds it, else of a new one; up to ``keep`` buffers are kept under ``name`` (more for outputs that
        callers hold many of at a time, such as the pathline records of every interval)."""
        shape = (int(shape),) if np.ndim(shape) == 0 else tuple(int(s) for s in shape)
        n = int(np.prod(shape))
        dtype = np.dtype(dtype)
        kept = self._buffers.setdefault(name, [])
        free = self._free(name)
        fits = [i for i in free if kept[i].dtype == dtype and kept[i].size >= n]
        if fits:
            best = min(fits, key=lambda i: kept[i].size)
            return kept[best][:n].reshape(shape)
        new = np.empty(n + int(SLACK * n), dtype)
        if free:
            kept[free[0]] = new
        else:
            if len(kept) >= keep:
                kept.pop(0)
            kept.append(new)
        return new[:n].reshape(shape)
