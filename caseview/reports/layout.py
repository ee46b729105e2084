"""A4 page layout on matplotlib figures: header, footer, headings, paragraphs, tables, chart slots.

Positions are in inches measured from the top of the page (``Page.cursor``); drawing uses the
figure's inch transform, so the layout is independent of dpi.
"""

from __future__ import annotations

from dataclasses import dataclass

from matplotlib.patches import Rectangle

from . import style

MARGIN = 0.55          # left/right margin, inches
TOP = 0.95             # first content line below the top edge, inches
BOTTOM = 1.05          # space kept for the footer, inches
_RENDERER = None


def text_width(text: str, size: float, bold: bool = False) -> float:
    """Width of one line of text in inches, measured with matplotlib's Agg renderer (DejaVu Sans)."""
    global _RENDERER
    from matplotlib.font_manager import FontProperties

    if _RENDERER is None:
        from matplotlib.backends.backend_agg import RendererAgg

        _RENDERER = RendererAgg(10, 10, 72)
    prop = FontProperties(family="DejaVu Sans", size=size, weight="bold" if bold else "normal")
    width, _, _ = _RENDERER.get_text_width_height_descent(text, prop, ismath=False)
    return width / 72.0


def wrap(text: str, width_inches: float, size: float, bold: bool = False) -> list:
    """Greedy word wrap to a column width (measured text widths); returns lines (at least one)."""
    lines = []
    for paragraph in str(text).split("\n"):
        words = paragraph.split()
        if not words:
            lines.append("")
            continue
        line = words[0]
        for word in words[1:]:
            candidate = f"{line} {word}"
            if text_width(candidate, size, bold) <= width_inches:
                line = candidate
            else:
                lines.append(line)
                line = word
        lines.append(line)
    return lines or [""]


@dataclass
class Column:
    title: str
    width: float            # inches
    align: str = "left"     # left | right


class Page:
    """One A4 portrait page (a matplotlib Figure) with a moving cursor."""

    def __init__(self, title: str):
        import matplotlib.figure

        self.figure = matplotlib.figure.Figure(figsize=style.A4_INCHES)
        self.title = title
        self.width, self.height = style.A4_INCHES
        self.cursor = TOP
        self.content_width = self.width - 2 * MARGIN

    # -------------------------------------------------------------- primitives
    def _y(self, from_top: float) -> float:
        return self.height - from_top

    def text(self, x: float, from_top: float, text: str, size=style.BODY_SIZE, colour=style.INK, weight="normal",
             ha="left", va="top", family=None):
        return self.figure.text(x, self._y(from_top), text, transform=self.figure.dpi_scale_trans, fontsize=size,
                                color=colour, fontweight=weight, ha=ha, va=va, family=family)

    def box(self, x: float, from_top: float, width: float, height: float, fill: str, edge: str | None = None, lw=0.6):
        self.figure.add_artist(Rectangle((x, self._y(from_top + height)), width, height,
                                         transform=self.figure.dpi_scale_trans, facecolor=fill,
                                         edgecolor=edge or fill, lw=lw, zorder=0))

    def rule(self, from_top: float, x0: float | None = None, x1: float | None = None, colour=style.RULE, lw=0.6):
        x0 = MARGIN if x0 is None else x0
        x1 = self.width - MARGIN if x1 is None else x1
        self.box(x0, from_top, x1 - x0, 0.0, colour, colour, lw=lw)

    def space_left(self) -> float:
        return self.height - BOTTOM - self.cursor

    # ------------------------------------------------------------------ blocks
    def heading(self, text: str, size=style.HEADING_SIZE, gap_before=0.15):
        self.cursor += gap_before
        self.text(MARGIN, self.cursor, text, size=size, weight="bold")
        self.cursor += size / 72.0 * 1.6

    def paragraph(self, text: str, size=style.BODY_SIZE, colour=style.INK, width: float | None = None,
                  indent: float = 0.0, gap_after=0.08):
        lines = wrap(text, (width or self.content_width) - indent - 0.1, size)
        line_height = size / 72.0 * 1.35
        self.text(MARGIN + indent, self.cursor, "\n".join(lines), size=size, colour=colour, va="top")
        self.figure.texts[-1].set_linespacing(1.35)
        self.cursor += line_height * len(lines) + gap_after

    def caution_box(self, text: str, size=style.BODY_SIZE):
        lines = wrap(text, self.content_width - 0.3, size)
        height = size / 72.0 * 1.35 * len(lines) + 0.22
        self.box(MARGIN, self.cursor, self.content_width, height, style.CAUTION_FILL, style.OKABE_ITO["orange"])
        text = self.text(MARGIN + 0.15, self.cursor + 0.11, "\n".join(lines), size=size)
        text.set_linespacing(1.35)
        self.cursor += height + 0.15

    def axes(self, height: float, left_pad: float = 0.75, right_pad: float = 0.25):
        """A chart slot ``height`` inches tall at the cursor; returns the Axes."""
        bottom = self._y(self.cursor + height)
        ax = self.figure.add_axes([(MARGIN + left_pad) / self.width, bottom / self.height,
                                   (self.content_width - left_pad - right_pad) / self.width, height / self.height])
        self.cursor += height
        return ax

    def table(self, columns: list, rows: list, size=style.TABLE_SIZE, max_lines: int = 6) -> list:
        """Draw as many rows as fit; return the rows that did not fit (for the next page).

        ``rows`` are lists of cell texts (one per column); a cell may also be a (text, colour) pair.
        """
        line_height = size / 72.0 * 1.3
        pad = 0.05
        header_lines = max(len(wrap(c.title, c.width - 0.08, size, bold=True)) for c in columns)
        header_height = header_lines * line_height + 2 * pad
        if self.space_left() < header_height + line_height + 2 * pad:
            return rows
        self._row(columns, [c.title for c in columns], size, line_height, pad, bold=True, max_lines=header_lines)
        self.rule(self.cursor, colour=style.INK, lw=0.7)
        for i, row in enumerate(rows):
            lines = max(min(len(wrap(self._cell_text(cell), c.width - 0.08, size)), max_lines)
                        for c, cell in zip(columns, row))
            height = lines * line_height + 2 * pad
            if self.space_left() < height:
                return rows[i:]
            if i % 2 == 1:
                self.box(MARGIN, self.cursor, self.content_width, height, style.STRIPE)
            self._row(columns, row, size, line_height, pad, max_lines=max_lines)
        self.rule(self.cursor, colour=style.RULE)
        self.cursor += 0.1
        return []

    @staticmethod
    def _cell_text(cell) -> str:
        return cell[0] if isinstance(cell, tuple) else str(cell)

    def _row(self, columns, cells, size, line_height, pad, bold=False, max_lines=6):
        x = MARGIN
        tallest = 1
        for column, cell in zip(columns, cells):
            colour = style.INK
            if isinstance(cell, tuple):
                cell, colour = cell
            lines = wrap(cell, column.width - 0.08, size, bold=bold)
            if len(lines) > max_lines:
                lines = lines[:max_lines - 1] + [lines[max_lines - 1][:-1] + "…"]
            tallest = max(tallest, len(lines))
            anchor = x + 0.04 if column.align == "left" else x + column.width - 0.04
            t = self.text(anchor, self.cursor + pad, "\n".join(lines), size=size, colour=colour,
                          weight="bold" if bold else "normal", ha=column.align)
            t.set_linespacing(1.3)
            x += column.width
        self.cursor += tallest * line_height + 2 * pad

    # ---------------------------------------------------------- header/footer
    def frame(self, header_left: str, header_right: str, caution: str, page_number: int, page_count: int):
        """Header (report name, as-of) and footer (caution, "page i of n")."""
        self.text(MARGIN, 0.45, header_left, size=style.SMALL_SIZE + 0.5, colour=style.MUTED)
        self.text(self.width - MARGIN, 0.45, header_right, size=style.SMALL_SIZE + 0.5, colour=style.MUTED,
                  ha="right")
        self.rule(0.68, colour=style.RULE)
        footer_top = self.height - BOTTOM + 0.3
        self.rule(footer_top, colour=style.RULE)
        lines = wrap(caution, self.content_width - 1.3, style.SMALL_SIZE)
        t = self.text(MARGIN, footer_top + 0.1, "\n".join(lines), size=style.SMALL_SIZE, colour=style.INK)
        t.set_linespacing(1.3)
        self.text(self.width - MARGIN, footer_top + 0.1, f"page {page_number} of {page_count}",
                  size=style.SMALL_SIZE + 0.5, colour=style.INK, ha="right")
