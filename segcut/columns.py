"""The output columns of a run: one table feeds ``summary.csv``, the report and the records.

Each :class:`Column` says where its value comes from in an image's record
(``records.jsonl``), its heading and kind in the report, and how the report formats
it. ``summary.csv`` has one column per entry, in this order; the report's table shows
the entries marked ``in_report`` (the optional ones only when some image has a
value). A new output column is one new entry here (plus, when the value is new, the
code that puts it in the record).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["Column", "OUTPUT_COLUMNS", "SUMMARY_COLUMNS", "column_value", "format_value"]


@dataclass(frozen=True)
class Column:
    """One output column.

    Attributes
    ----------
    key : str
        Its name in ``summary.csv`` and in the report's rows.
    heading : str
        Its heading in the report.
    kind : str
        ``"text"``, ``"num"`` (sorted as numbers) or ``"list"`` (a list of texts).
    format : str
        How the report shows a number: a format spec such as ``".3f"``, or
        ``"percent"`` (100 times the value, with ``%``).
    source : str
        The record field the value is read from (``a.b``: field ``b`` of the table in
        field ``a``).
    in_report : bool
        Shown in the report's table.
    optional : bool
        Written by newer versions only (or only by some configurations): the report
        shows the column only when some image has a value.
    meaning : str
        One line for the documentation and the report's column titles.
    """

    key: str
    heading: str
    kind: str
    format: str
    source: str
    in_report: bool = True
    optional: bool = False
    meaning: str = ""


#: Every output column, in ``summary.csv`` order.
OUTPUT_COLUMNS = (
    Column("input", "input", "text", "", "input", meaning="the input's name in the run"),
    Column("status", "status", "text", "", "status", meaning="ok or failed"),
    Column("foreground_fraction", "foreground", "num", ".3f", "foreground_fraction",
           meaning="share of the pixels on the foreground side"),
    Column("cut_value", "cut value", "num", ".6g", "value",
           meaning="the cut value of the split on its graph"),
    Column("upper_bound", "upper bound", "num", ".6g", "upper_bound",
           meaning="certified upper bound: no split of that graph cuts more"),
    Column("gap", "gap", "num", "percent", "gap",
           meaning="(upper_bound - cut_value) / |upper_bound|, of the final mask"),
    Column("solver_gap", "solver gap", "num", "percent", "solver_gap", optional=True,
           meaning="the same for the solver's own split, before the pixel refinement moved "
                   "the mask"),
    Column("n_superpixels", "superpixels", "num", ".0f", "n_superpixels",
           meaning="number of superpixels (graph vertices without the terminal)"),
    Column("hypothesis", "hypothesis", "text", "", "hypothesis", optional=True,
           meaning="the start hypothesis whose end point was kept"),
    Column("hypothesis_disagreement", "disagreement", "num", ".3f",
           "hypothesis_disagreement", optional=True,
           meaning="1 - IoU between the kept split and the best competing hypothesis's"),
    Column("background_radius", "flattened", "num", ".0f", "background.radius", optional=True,
           meaning="half-width in pixels of the background flattening (segcut.background); "
                   "0 when the image was not flattened"),
    Column("refine_changed_fraction", "refined", "num", "percent", "refine_changed_fraction",
           optional=True, meaning="share of pixels whose side the boundary refinement changed"),
    Column("uncertain_fraction", "uncertain", "num", "percent", "uncertain_fraction",
           optional=True, meaning="share of pixels whose side is uncertain"),
    Column("frame_fraction", "on frame", "num", "percent", "frame_fraction", optional=True,
           meaning="share of the image's outermost pixels that are foreground"),
    Column("seconds", "seconds", "num", ".2f", "seconds",
           meaning="wall time of the image in its worker"),
    Column("mask", "mask", "text", "", "mask", in_report=False, optional=True,
           meaning="the mask file written: masks/<name>.png, or .tif (in tiles) for 3-D "
                   "stacks and images above max_graph_pixels"),
    Column("warnings", "warnings", "list", "", "warnings", in_report=False,
           meaning="notes on the input or the split, one line each"),
    Column("error", "error", "text", "", "error", in_report=False,
           meaning="why the input failed"),
)

#: Column names of ``summary.csv``, in order.
SUMMARY_COLUMNS = tuple(c.key for c in OUTPUT_COLUMNS)


def column_value(column: Column, record: dict):
    """The value of ``column`` in a record (``[]`` for a missing list, else None).

    Examples
    --------
    >>> column_value(OUTPUT_COLUMNS[3], {"value": 12.5})
    12.5
    >>> column_value(OUTPUT_COLUMNS[-2], {})
    []
    >>> flat = next(c for c in OUTPUT_COLUMNS if c.key == "background_radius")
    >>> column_value(flat, {"background": {"radius": 16}}), column_value(flat, {})
    (16, None)
    """
    value = record
    for part in column.source.split("."):
        value = value.get(part) if isinstance(value, dict) else None
    if column.kind == "list":
        return list(value or [])
    return value


def format_value(column: Column, value) -> str:
    """``value`` as the report shows it ('' when missing).

    Examples
    --------
    >>> gap = next(c for c in OUTPUT_COLUMNS if c.key == "gap")
    >>> format_value(gap, 0.01234), format_value(gap, None)
    ('1.23%', '')
    """
    if value is None:
        return ""
    if column.kind == "list":
        return "; ".join(str(v) for v in value)
    if column.kind == "text":
        return str(value)
    value = float(value)
    if not math.isfinite(value):
        return ""
    if column.format == "percent":
        return f"{100 * value:.3g}%"
    return format(value, column.format)
