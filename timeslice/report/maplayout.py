"""Where the panels of a map figure go, computed once in inches (no layout engine, no tight
bounding box: the figure is drawn once, when it is saved).

A grid of panels has one row per slice or period and one column per climate model; the row
label stands at the left of its row, the column value (the model) is the panel's title; one
colour bar stands at the right of every row; the legend lies in a band under the panels and
the title in a band above them. Tick labels are drawn only on the outer panels (the left
column and the bottom panel of every column).
"""

from __future__ import annotations

import textwrap
from dataclasses import dataclass

__all__ = ["PanelLayout", "panel_layout", "single_layout", "wrap"]

#: Inches per character of 7-point text (a rough average for the sans-serif face).
_CHAR_IN = 0.058


def wrap(text: str, width_in: float, *, fontsize: float = 7.0) -> str:
    """`text` wrapped onto lines no wider than `width_in` inches at `fontsize` points.

    Parameters
    ----------
    text : str
        The text.
    width_in : float
        Available width, inches.
    fontsize : float
        Font size, points.

    Returns
    -------
    str
    """
    chars = max(8, int(width_in / (_CHAR_IN * fontsize / 7.0)))
    return "\n".join(textwrap.wrap(str(text), chars)) or str(text)


@dataclass(frozen=True)
class PanelLayout:
    """Sizes of a map figure, inches, and the rectangles of its parts in figure fractions.

    Parameters
    ----------
    width, height : float
        Figure size, inches.
    nrows, ncols : int
        Panel grid.
    panel_w, panel_h : float
        Panel size, inches.
    left, right, top, bottom, title_h, gap_x, gap_y, legend_h, bar : float
        Margins and bands, inches.
    """

    width: float
    height: float
    nrows: int
    ncols: int
    panel_w: float
    panel_h: float
    left: float
    right: float
    top: float
    bottom: float
    title_h: float
    gap_x: float
    gap_y: float
    legend_h: float
    bar: bool

    def panel(self, r: int, c: int) -> list[float]:
        """Rectangle of panel (`r`, `c`) as (left, bottom, width, height) figure fractions.

        Parameters
        ----------
        r, c : int
            Row and column.

        Returns
        -------
        list of float
        """
        x = self.left + c * (self.panel_w + self.gap_x)
        y_top = self.top + r * (self.title_h + self.panel_h + self.gap_y) + self.title_h
        y = self.height - y_top - self.panel_h
        return [x / self.width, y / self.height, self.panel_w / self.width,
                self.panel_h / self.height]

    def colour_bar(self, r: int, ncols_in_row: int | None = None) -> list[float]:
        """Rectangle of the colour bar of row `r` (right of the row's last panel).

        Parameters
        ----------
        r : int
            Row.
        ncols_in_row : int, optional
            Panels in that row (default all columns).

        Returns
        -------
        list of float
        """
        c = (ncols_in_row or self.ncols) - 1
        x0, y0, w, h = self.panel(r, c)
        x = x0 + w + 0.12 / self.width
        return [x, y0 + 0.08 * h, 0.11 / self.width, 0.84 * h]

    def row_label_x(self) -> float:
        """x (figure fraction) of the row labels, at the left edge."""
        return 0.12 / self.width

    def legend_y(self) -> float:
        """y (figure fraction) of the legend's bottom edge."""
        return 0.04 / self.height

    def title_y(self) -> float:
        """y (figure fraction) of the top of the figure title."""
        return 1.0 - 0.08 / self.height


def panel_layout(nrows: int, ncols: int, aspect: float, *, bar: bool, legend_rows: int,
                 row_labels: bool, panel_w: float | None = None,
                 title_lines: int = 1) -> PanelLayout:
    """Layout of a grid of map panels.

    Parameters
    ----------
    nrows, ncols : int
        Panel grid.
    aspect : float
        Height over width of one map.
    bar : bool
        Continuous layer: a colour bar right of every row.
    legend_rows : int
        Lines of the legend under the panels.
    row_labels : bool
        Leave room for the row labels at the left.
    panel_w : float, optional
        Panel width, inches (default 2.5 for three or more columns, 3.0 else).
    title_lines : int
        Lines of the panel titles.

    Returns
    -------
    PanelLayout
    """
    w = panel_w or (2.5 if ncols >= 3 else 3.0)
    h = min(4.2, max(1.0, w * aspect))
    left = 0.5 + (0.22 if row_labels else 0.0)
    right = 0.95 if bar else 0.15
    title_h = 0.05 + 0.14 * title_lines
    gap_y = 0.3  # under every row: the bottom tick labels of a column that ends there
    legend_h = 0.1 + 0.19 * legend_rows if legend_rows else 0.0
    top = 0.42
    bottom = legend_h + 0.05
    width = left + ncols * w + (ncols - 1) * 0.1 + right
    height = top + nrows * (title_h + h + gap_y) + bottom
    return PanelLayout(width, height, nrows, ncols, w, h, left, right, top, bottom, title_h,
                       0.1, gap_y, legend_h, bar)


def single_layout(aspect: float, *, bar: bool, width: float = 6.0) -> PanelLayout:
    """Layout of a figure with one map (title above, colour bar at the right).

    Parameters
    ----------
    aspect : float
        Height over width of the map.
    bar : bool
        Leave room for a colour bar.
    width : float
        Figure width, inches.

    Returns
    -------
    PanelLayout
    """
    left, right = 0.55, (1.05 if bar else 0.2)
    w = width - left - right
    h = min(7.0, max(1.6, w * aspect))
    top, title_h, gap_y = 0.1, 0.3, 0.32
    height = top + title_h + h + gap_y
    return PanelLayout(width, height, 1, 1, w, h, left, right, top, 0.0, title_h, 0.0, gap_y,
                       0.0, bar)
