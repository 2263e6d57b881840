"""Number and table formatting in the conventions of psychology journals.

The rules below are common practice (they follow the style most journals of the
field ask for; e.g. American Psychological Association, 2020, *Publication
Manual*, 7th ed., sections 6.36 and 7.21): estimates with two decimals, a true
minus sign, no leading zero for statistics that cannot exceed 1 (p, CFI, TLI,
RMSEA, SRMR, alpha, omega), p-values to three decimals with ``< .001``, counts
with thousands separators, and an em dash for a value that does not exist.
"""

from __future__ import annotations

import html
import math
import re
from typing import Iterable, Sequence

import pandas as pd

#: printed for a value that is missing or not defined
MISSING = "\u2014"
MINUS = "\u2212"


def _is_missing(x) -> bool:
    if x is None:
        return True
    try:
        return bool(pd.isna(x))
    except (TypeError, ValueError):
        return False


def _sign(text: str) -> str:
    return MINUS + text[1:] if text.startswith("-") else text


def fmt_number(x, digits: int = 2) -> str:
    """A number with ``digits`` decimals and a true minus sign; ``-0.00`` prints as ``0.00``.

    >>> fmt_number(-1.234)
    '\u22121.23'
    >>> fmt_number(float("nan"))
    '\u2014'
    """
    if _is_missing(x):
        return MISSING
    x = float(x)
    if math.isinf(x):
        return "\u221e" if x > 0 else MINUS + "\u221e"
    text = f"{x:,.{digits}f}"
    if text.lstrip("-").strip("0.,") == "":
        text = text.lstrip("-")
    return _sign(text)


_SUPERSCRIPT = str.maketrans("-0123456789", "\u207b\u2070\u00b9\u00b2\u00b3\u2074\u2075\u2076\u2077\u2078\u2079")


def fmt_estimate(x, digits: int = 2, significant: int = 3) -> str:
    """An estimate or standard error: ``digits`` decimals, or ``significant`` digits below 0.1.

    Growth parameters in small time units are small (a slope of 0.0137 per day, a slope
    variance of 0.000013): two decimals would print them as 0.00. Below 0.1 in absolute
    value the number keeps ``significant`` significant digits, written out down to 0.0001
    and as a power of ten below that.

    >>> [fmt_estimate(v) for v in (143.0251, -1.5, 0.0136891, -0.000632, 1.31e-05, 0.0)]
    ['143.03', '−1.50', '0.0137', '−0.000632', '1.31 × 10⁻⁵', '0.00']
    """
    if _is_missing(x):
        return MISSING
    x = float(x)
    if math.isinf(x) or x == 0 or abs(x) >= 0.1:
        return fmt_number(x, digits)
    exponent = math.floor(math.log10(abs(x)))
    if exponent >= -4:
        decimals = significant - 1 - exponent
        return fmt_number(round(x, decimals), decimals)
    mant = f"{x / 10.0 ** exponent:.{significant - 1}f}"
    if mant.lstrip("-") == "10." + "0" * (significant - 1):  # rounding reached the next power
        mant, exponent = ("-" if x < 0 else "") + "1." + "0" * (significant - 1), exponent + 1
    return _sign(mant) + " \u00d7 10" + str(exponent).translate(_SUPERSCRIPT)


def fmt_unit(x, digits: int = 3) -> str:
    """A statistic bounded by 1 in absolute value, without the leading zero (``.952``).

    >>> fmt_unit(0.95234)
    '.952'
    >>> fmt_unit(-0.05)
    '\u2212.050'
    >>> fmt_unit(1.0)
    '1.000'
    """
    text = fmt_number(x, digits)
    if text == MISSING:
        return text
    for lead in ("0.", MINUS + "0."):
        if text.startswith(lead):
            return text.replace("0.", ".", 1)
    return text


def fmt_p(p) -> str:
    """A p-value with three decimals, ``< .001`` below .001 and ``> .999`` above .999.

    >>> [fmt_p(v) for v in (0.0004, 0.0123, 0.5, 0.99996)]
    ['< .001', '.012', '.500', '> .999']
    """
    if _is_missing(p):
        return MISSING
    p = float(p)
    if p < 0.001:
        return "< .001"
    if p > 0.999:
        return "> .999"
    return fmt_unit(p, 3)


def fmt_count(n) -> str:
    """A count with thousands separators (``1,204``)."""
    if _is_missing(n):
        return MISSING
    return f"{int(round(float(n))):,}"


def fmt_small(n, min_cell: int) -> str:
    """A count, shown as ``< min_cell`` when it is positive but below ``min_cell``.

    Small cells can point at single people; suppressing them is common practice in
    statistical disclosure control (the threshold is the study's ``report.min_cell``).
    """
    if _is_missing(n):
        return MISSING
    value = int(round(float(n)))
    if 0 < value < int(min_cell):
        return f"< {int(min_cell)}"
    return fmt_count(value)


def fmt_percent(share, digits: int = 1) -> str:
    """A share (0-1) as a percentage (``87.5%``)."""
    if _is_missing(share):
        return MISSING
    return fmt_number(100.0 * float(share), digits) + "%"


def fmt_interval(lo, hi, unit: bool = False, digits: int | None = None) -> str:
    """A confidence interval in square brackets (``[.030, .061]``)."""
    if _is_missing(lo) and _is_missing(hi):
        return MISSING
    if unit:
        d = 3 if digits is None else digits
        return f"[{fmt_unit(lo, d)}, {fmt_unit(hi, d)}]"
    d = 2 if digits is None else digits
    return f"[{fmt_number(lo, d)}, {fmt_number(hi, d)}]"


def fmt_chisq(chisq, df) -> str:
    """``χ²(df) = value`` with two decimals."""
    if _is_missing(chisq):
        return MISSING
    return f"\u03c7\u00b2({fmt_count(df)}) = {fmt_number(chisq, 2)}"


def fmt_bool(x, yes: str = "yes", no: str = "no") -> str:
    if _is_missing(x):
        return MISSING
    if isinstance(x, str):
        return yes if x.strip().lower() in {"true", "1", "yes"} else no
    return yes if bool(x) else no


def esc(text) -> str:
    """HTML-escape any value as text."""
    return html.escape("" if _is_missing(text) else str(text), quote=True)


_NUMERIC = re.compile("^(?:[<>] )?[\u2212\\-]?[\\d.,]+%?$|^\\[.*\\]$|^\u03c7\u00b2")


class Table:
    """A formatted report table: caption, column heads, rows of text and a note.

    Cells are plain text (escaped when rendered). Columns listed in ``numeric``
    are right-aligned on the decimal point side, as journal tables are.
    """

    def __init__(
        self,
        caption: str,
        columns: Sequence[str],
        rows: Iterable[Sequence[str]],
        *,
        note: str | None = None,
        numeric: Iterable[int] | None = None,
        key: str | None = None,
        scroll: bool = False,
        mono: Iterable[int] = (),
    ):
        self.caption = caption
        self.columns = list(columns)
        self.rows = [list(r) for r in rows]
        self.note = note
        self.numeric = self._numeric_columns() if numeric is None else set(numeric)
        self.key = key
        self.scroll = scroll
        self.mono = set(mono)

    def __len__(self) -> int:
        return len(self.rows)

    def to_html(self, number: int | None = None) -> str:
        """The table as an HTML fragment (``<figure class="wt-table">``).

        A table of :data:`WIDE_COLUMNS` or more columns is set in a smaller type
        (``<table class="wt-wide">``) so that it fits the page; column heads wrap, and
        long names break after an underscore, so no table needs a horizontal scroll.
        """
        label = f"Table {number}. " if number is not None else ""
        ident = f' id="{esc(self.key)}"' if self.key else ""
        head = "".join(
            f'<th scope="col"{self._cls(j)}>{_breakable(c)}</th>' for j, c in enumerate(self.columns)
        )
        body = []
        for row in self.rows:
            cells = "".join(f"<td{self._cls(j, v)}>{_breakable(v)}</td>" for j, v in enumerate(row))
            body.append(f"<tr>{cells}</tr>")
        wrap_open = '<div class="wt-scroll">' if self.scroll else ""
        wrap_close = "</div>" if self.scroll else ""
        wide = ' class="wt-wide"' if len(self.columns) >= WIDE_COLUMNS else ""
        note = f'<p class="wt-note"><em>Note.</em> {esc(self.note)}</p>' if self.note else ""
        return (
            f'<figure class="wt-table"{ident}><figcaption><span class="wt-label">{esc(label)}</span>'
            f"{esc(self.caption)}</figcaption>{wrap_open}<table{wide}><thead><tr>{head}</tr></thead>"
            f"<tbody>{''.join(body)}</tbody></table>{wrap_close}{note}</figure>"
        )

    def _numeric_columns(self) -> set[int]:
        """Columns whose every cell is a printed number (right-aligned), never the first."""
        found = set()
        for j in range(1, len(self.columns)):
            cells = [r[j] for r in self.rows if j < len(r) and r[j] != MISSING]
            if cells and all(_NUMERIC.match(c) for c in cells):
                found.add(j)
        return found

    def _cls(self, j: int, value: str | None = None) -> str:
        names = (["wt-num"] if j in self.numeric else []) + (["wt-hash"] if j in self.mono else [])
        return f' class="{" ".join(names)}"' if names else ""


#: tables with at least this many columns are set in a smaller type (``table.wt-wide``)
WIDE_COLUMNS = 8


def _breakable(text) -> str:
    """Escaped cell text with a line-break opportunity after each underscore of a long name.

    Variable names such as ``evening_screen_time`` have no space to wrap at; without the
    ``<wbr>`` a narrow page would have to overflow. The text a reader copies is unchanged.
    """
    out = esc(text)
    return out.replace("_", "_<wbr>") if len(out) > 12 else out
