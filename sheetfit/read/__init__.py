"""Read: a workbook or CSV file → tidy observations, each with its source row and a reason when it cannot be used.

Other stages use this package through the names below and the modules `tidy` (the data handed on),
`frame` (observations from an in-memory table), `cells` (one cell → number or reason) and
`observations` (read_observations).
"""

from __future__ import annotations

from .sources import check_path, open_book, sniff

__all__ = ["check_path", "open_book", "sniff"]
