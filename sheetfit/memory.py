"""How numpy asks the kernel for memory while sheetfit runs.

numpy marks every array of 4 MB or more for transparent huge pages. Where the kernel's
huge-page defrag setting is `madvise` (a common default), the first touch of such an array
can stall on memory compaction; sheetfit's engine allocates many short-lived padded arrays
of that size, and on a fresh process that stalling cost more than the fit itself (measured
in bench/RESULTS.md). Inside `ordinary_pages()` numpy uses ordinary pages; the previous
setting is restored on exit.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager


@contextmanager
def ordinary_pages() -> Iterator[None]:
    """Allocate numpy arrays without the huge-page hint for the duration of the block."""
    import numpy as np

    setter = getattr(getattr(getattr(np, "_core", None), "multiarray", None), "_set_madvise_hugepage", None)
    if setter is None:      # pragma: no cover - numpy without the switch: nothing to change
        yield
        return
    previous = setter(False)
    try:
        yield
    finally:
        setter(previous)
