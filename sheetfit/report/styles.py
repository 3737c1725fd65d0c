"""The results workbook's palette, cell formats and colour legend, defined once.

Colours are named by what they mean, so every sheet, chart and the legend on `about` agree.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

# Cell highlights (conditional formatting): fill, text.
# pale teal (hue about 185°): far from the green, red and yellow-amber of spreadsheet applications'
# built-in good / bad / neutral cell styles, and from the slate and violet below
CHECK_FAILED_FILL, CHECK_FAILED_TEXT = "#CCEBEE", "#0C4A50"      # pale teal
LEFT_OUT_FILL, LEFT_OUT_TEXT = "#D8DEE6", "#3E4856"              # slate
UNUSUAL_ROW_FILL, UNUSUAL_ROW_TEXT = "#E5D9F2", "#3F2A5C"        # soft violet

# Table furniture.
HEADER_FILL, HEADER_TEXT, HEADER_RULE = "#E9E3D5", "#25313B", "#8C806A"  # parchment, ink
SECTION_TEXT = "#25313B"
NOTE_TEXT = "#5B6670"
INPUT_FILL, INPUT_RULE = "#FFF6D8", "#B8A66A"   # pale straw: cells that take the reader's input
LINK_TEXT = "#1D5C8A"                           # deep steel blue, underlined: a link within the workbook

# Chart colours.
POINTS = "#2D6A86"          # steel blue: observations
FITTED = "#A8512A"          # rust: fitted line and its band
REFERENCE = "#808080"       # grey: zero line, y = x line
OVERVIEW_OK = "#B5ADA0"     # warm grey: groups without flags
OVERVIEW_FLAGGED = "#1B8A94"  # deep teal: flagged groups (same meaning as the pale teal cells)

FONT = "Calibri"
CHART_TITLE_SIZE = 10
CHART_AXIS_SIZE = 9


@dataclass(frozen=True)
class Highlight:
    """One meaning, one colour: used for conditional formats and for the legend."""

    key: str
    colour_name: str
    fill: str
    text: str
    meaning: str


HIGHLIGHTS: tuple[Highlight, ...] = (
    Highlight("check_failed", "pale teal", CHECK_FAILED_FILL, CHECK_FAILED_TEXT,
              "groups: at least one check failed (see reasons); checks: the check failed"),
    Highlight("left_out", "slate", LEFT_OUT_FILL, LEFT_OUT_TEXT,
              "groups: the group could not be fitted; observations: the row was not used (see reason)"),
    Highlight("unusual_row", "soft violet", UNUSUAL_ROW_FILL, UNUSUAL_ROW_TEXT,
              'observations: look at this row: its row flags say "leverage 1", "outlying" or "moves the '
              'fit" (the row behind a failed influence check); the softer "high leverage" and "influential" '
              "are listed in row flags without shading"),
)

CHART_LEGEND: tuple[tuple[str, str], ...] = (
    ("steel-blue points", "observations used in the fit"),
    ("rust line", "fitted values; dashed rust lines: 95% confidence band of the mean"),
    ("grey line", "reference: zero residual, or y = x"),
    ("overview: deep teal", "flagged groups; warm grey: groups without flags"),
)


class Styles:
    """Formats of one workbook, made once and shared by every sheet builder."""

    def __init__(self, workbook: Any) -> None:
        self._wb = workbook
        self._numbers: dict[str, Any] = {}
        self.header = workbook.add_format({
            "bold": True, "font_color": HEADER_TEXT, "bg_color": HEADER_FILL,
            "bottom": 2, "bottom_color": HEADER_RULE, "text_wrap": False, "valign": "bottom"})
        self.header_number = workbook.add_format({
            "bold": True, "font_color": HEADER_TEXT, "bg_color": HEADER_FILL,
            "bottom": 2, "bottom_color": HEADER_RULE, "align": "right", "valign": "bottom"})
        self.header_text = workbook.add_format({
            "bold": True, "font_color": HEADER_TEXT, "bg_color": HEADER_FILL,
            "bottom": 2, "bottom_color": HEADER_RULE, "indent": 1, "valign": "bottom"})
        self.header_centre = workbook.add_format({
            "bold": True, "font_color": HEADER_TEXT, "bg_color": HEADER_FILL,
            "bottom": 2, "bottom_color": HEADER_RULE, "align": "center", "valign": "bottom"})
        self.count_centre = workbook.add_format({"num_format": "0", "align": "center"})
        self.text_cell = workbook.add_format({"indent": 1, "valign": "top"})
        self.top = workbook.add_format({"valign": "top"})     # table cells sit at the top of a tall row
        # long text in a table column wraps at the column's width (rows grow to fit: no fixed heights)
        self.wrap_cell = {False: workbook.add_format({"text_wrap": True, "valign": "top"}),
                          True: workbook.add_format({"text_wrap": True, "valign": "top", "indent": 1})}
        self.title = workbook.add_format({"bold": True, "font_size": 13, "font_color": SECTION_TEXT})
        self.section = workbook.add_format({"bold": True, "font_size": 11, "font_color": SECTION_TEXT,
                                            "bottom": 1, "bottom_color": HEADER_RULE})
        self.note = workbook.add_format({"italic": True, "font_color": NOTE_TEXT})
        self.wrap = workbook.add_format({"text_wrap": True, "valign": "top", "align": "left"})
        self.text = workbook.add_format({"valign": "top"})
        self.link = workbook.add_format({"font_color": LINK_TEXT, "underline": 1, "indent": 1})
        self.group_label = workbook.add_format({"bold": True, "font_size": 11, "font_color": SECTION_TEXT})
        self.highlight = {h.key: workbook.add_format({"bg_color": h.fill, "font_color": h.text})
                          for h in HIGHLIGHTS}
        self.label_name = {False: workbook.add_format({"bold": True, "font_size": 11, "font_color": SECTION_TEXT}),
                           True: workbook.add_format({"bold": True, "font_size": 11,
                                                      "font_color": CHECK_FAILED_TEXT})}
        self.label_cell = {False: workbook.add_format({"text_wrap": True, "valign": "top"}),
                           True: workbook.add_format({"text_wrap": True, "valign": "top",
                                                      "bg_color": CHECK_FAILED_FILL,
                                                      "font_color": CHECK_FAILED_TEXT})}
        self.label_tail = {False: workbook.add_format({"font_color": NOTE_TEXT}),
                           True: workbook.add_format({"font_color": CHECK_FAILED_TEXT})}
        # Input cells of the explorer and live prediction sheets; `quiet` hides #N/A in chart-only cells.
        shaded = {"bg_color": INPUT_FILL, "border": 1, "border_color": INPUT_RULE, "bold": True}
        self.input = workbook.add_format(shaded)
        self.input_percent = workbook.add_format({**shaded, "num_format": "0.0%"})
        self.quiet = workbook.add_format({"font_color": "#FFFFFF"})
        # A cell-level twin of each highlight, for legend samples and labels on the charts sheet.
        self.sample = {h.key: workbook.add_format({"bg_color": h.fill, "font_color": h.text, "bold": True})
                       for h in HIGHLIGHTS}

    def number(self, num_format: str) -> Any:
        """A cached cell format showing `num_format` (cells keep full precision)."""
        fmt = self._numbers.get(num_format)
        if fmt is None:
            fmt = self._wb.add_format({"num_format": num_format, "valign": "top"})
            self._numbers[num_format] = fmt
        return fmt


def point_series(name: str, colour: str = POINTS, size: int = 4) -> dict[str, Any]:
    """Options of a markers-only scatter series."""
    return {"name": name, "line": {"none": True},
            "marker": {"type": "circle", "size": size,
                       "fill": {"color": colour}, "border": {"color": colour}}}


def line_series(name: str, colour: str = FITTED, width: float = 1.75, dashed: bool = False) -> dict[str, Any]:
    """Options of a line-only scatter series (solid or dashed)."""
    line: dict[str, Any] = {"color": colour, "width": width}
    if dashed:
        line["dash_type"] = "dash"
    return {"name": name, "marker": {"type": "none"}, "line": line}


def chart_title(text: str) -> dict[str, Any]:
    return {"name": text, "name_font": {"size": CHART_TITLE_SIZE, "bold": True, "name": FONT}}


def axis(title: str, **extra: Any) -> dict[str, Any]:
    """Axis options: a small title, readable tick labels kept at the plot's edge."""
    opts: dict[str, Any] = {
        "name": title,
        "name_font": {"size": CHART_AXIS_SIZE, "bold": False, "name": FONT},
        "num_font": {"size": CHART_AXIS_SIZE - 1, "name": FONT},
        "label_position": "low",
        "major_gridlines": {"visible": True, "line": {"color": "#E3E3E3", "width": 0.5}},
        "line": {"color": "#9A9A9A"},
    }
    opts.update(extra)
    return opts
