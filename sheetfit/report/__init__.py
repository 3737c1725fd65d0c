"""The results workbook: formats FitResults into sheets; computes no statistics.

Sheets, in order: attention, groups, coefficients, checks, since previous run and coefficient changes
(with --previous), across groups (two or more groups fitted alike), observations, charts, overview, about, then
add-on sheets (`_extra_sheets()`), then the data sheets that charts and formulas read.

Adding a sheet: write a function `build(ctx: WriteContext) -> None` that calls
`ctx.add_sheet(label)` and writes rows in order (constant_memory), using `ctx.styles` for formats
and `ctx.note(item, text)` for lines on `about`; data it needs on a separate sheet goes through
`ctx.reserve_data_sheet(label, fill)`, which returns the sheet's name at once (for formulas and
chart ranges) and fills it after every builder ran. Then return it from `_extra_sheets()` below
(or pass `extra_sheets=[build]` to write_results).
"""

from __future__ import annotations

import shutil
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from .book import WORKBOOK_OPTIONS, SheetBuilder, WriteContext
from .safe import atomic_output, check_output_path, output_error, scratch_folder

if TYPE_CHECKING:
    from ..results.types import FitResults

__all__ = ["write_results", "WriteContext", "SheetBuilder", "core_sheets"]

ZIP64_CELLS = 40_000_000   # beyond this many observation cells the archive may pass 4 GB


def core_sheets() -> list[SheetBuilder]:
    """The contract's sheets, in order."""
    from .about import about_sheet
    from .attention import attention_sheet
    from .charts import charts_sheets
    from .tables import (
        checks_sheet,
        coefficients_sheet,
        groups_sheet,
        observations_sheet,
    )
    from .changes import changes_sheet
    from .comparison import comparison_sheet
    return [attention_sheet, groups_sheet, coefficients_sheet, checks_sheet, changes_sheet, comparison_sheet,
            observations_sheet, charts_sheets, about_sheet]


def _extra_sheets() -> list[SheetBuilder]:
    """Add-on sheets written after the core ones (explorer, live prediction…), in this order."""
    from .explorer import explorer_sheet
    from .live_prediction import live_prediction_sheet
    return [explorer_sheet, live_prediction_sheet]


def write_results(results: "FitResults", path: Path | None = None, overwrite: bool = False, *,
                  extra_sheets: Sequence[SheetBuilder] | None = None) -> Path:
    """Write the results workbook to `path` (default: beside the input) and return where it went.

    Refuses the input file itself (any input file of several), an existing file unless `overwrite` (or the job's overwrite),
    and an unwritable folder, each with OutputError. The file appears complete or not at all; a
    failure of the file system (no space left, a name too long…) is an OutputError too, and leaves
    neither the temporary file nor the scratch folder behind (see report.safe).
    """
    import xlsxwriter
    from xlsxwriter.exceptions import FileCreateError, FileSizeError

    from .styles import Styles

    from ..read.many import files_of

    job = results.job
    target = check_output_path(files_of(job.inputs), Path(path) if path is not None else job.output_path,
                               overwrite or job.overwrite)
    builders = [*core_sheets(), *_extra_sheets(), *(extra_sheets or ())]
    with scratch_folder() as scratch, atomic_output(target, overwrite or job.overwrite) as tmp:
        # xlsxwriter's row files (constant_memory) and parts go in the scratch folder
        wb = xlsxwriter.Workbook(str(tmp), {**WORKBOOK_OPTIONS, "tmpdir": str(scratch)})
        if len(results.observations) * max(len(results.observations.columns), 1) > ZIP64_CELLS:
            wb.use_zip64()
        try:
            ctx = WriteContext(workbook=wb, results=results, styles=Styles(wb))
            for build in builders:
                build(ctx)
            ctx.finish()
            wb.close()
        except (FileCreateError, FileSizeError) as exc:
            raise output_error(target, exc) from None
        finally:
            _release(wb)
        if ctx.bulk:                  # large tables: their rows go in while the archive is copied
            _splice(tmp, scratch / "shell.xlsx", ctx.bulk)
    return target


def _splice(tmp: Path, shell: Path, bulk: list) -> None:
    """Move xlsxwriter's workbook aside and rebuild it at `tmp` with the bulk rows inserted."""
    from .fastrows import splice
    shutil.move(str(tmp), str(shell))
    try:
        with open(tmp, "xb") as fh:
            splice(shell, fh, bulk)
    finally:
        shell.unlink(missing_ok=True)


def _release(wb) -> None:
    """Close xlsxwriter's open row files after a failed write, so the scratch folder can go."""
    if wb.fileclosed:
        return
    for ws in wb.worksheets():
        fh = getattr(ws, "row_data_fh", None)
        if fh is not None and not fh.closed:
            fh.close()
