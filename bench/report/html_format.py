"""How the report page writes numbers and builds its tables: significant figures tied to the
uncertainty (``(1.234 ± 0.012) × 10⁻³``), value-and-sigma cells, key-value tables. Every piece of
text passes through `esc` (``html.escape``)."""

from __future__ import annotations

import html
import math
from collections.abc import Sequence
from typing import Any


def esc(value: Any) -> str:
    """Text for the page: ``html.escape`` of ``str(value)`` (quotes too)."""
    return html.escape("" if value is None else str(value), quote=True)


# --------------------------------------------------------------------------------------------
# Numbers


_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def exponent(value: float, sigma: float) -> int:
    ref = abs(value) if value else abs(sigma)
    if not (math.isfinite(ref) and ref > 0):
        return 0
    e = int(math.floor(math.log10(ref)))
    return e if (e >= 5 or e <= -4) else 0


def decimals(sigma: float) -> int | None:
    if not (math.isfinite(sigma) and sigma > 0):
        return None
    return min(12, max(0, 1 - int(math.floor(math.log10(sigma)))))


def scaled(x: float, exp: int, decimals: int | None) -> str:
    if x is None or not isinstance(x, (int, float)):
        return "–"
    if not math.isfinite(x):
        return "n/a"
    y = x / 10.0**exp
    text = f"{y:.{decimals}f}" if decimals is not None else f"{y:.6g}"
    return text.replace("-", "−")


def times_ten(exp: int) -> str:
    return f" × 10{str(exp).translate(_SUPERSCRIPT)}" if exp else ""


def sci(x: Any, digits: int = 2) -> str:
    """``x`` to ``digits`` significant digits, as ``m × 10ⁿ`` when it is very large or small."""
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        return "–"
    if not math.isfinite(x):
        return "n/a"
    if x == 0:
        return "0"
    e = int(math.floor(math.log10(abs(x))))
    if e >= 5 or e <= -4:
        m = float(f"{x / 10.0**e:.{digits - 1}e}".split("e")[0])
        if abs(m) >= 10:  # rounding carried over
            m, e = m / 10, e + 1
        return f"{m:.{digits - 1}f}".replace("-", "−") + times_ten(e)
    if e >= digits - 1:
        return f"{round(x, digits - 1 - e):.0f}".replace("-", "−")
    return f"{x:.{digits - 1 - e}f}".replace("-", "−")


def quantity_cells(
    value: float, sigma: float, noise: float, systematic: float
) -> tuple[str, str, str, str, int, int | None]:
    """Value (to the digit of sigma's second significant figure, on the value's power of ten),
    and sigma, noise and systematic parts to two significant digits."""
    exp = exponent(value, sigma)
    dec = decimals(sigma / 10.0**exp) if isinstance(sigma, (int, float)) else None
    return (scaled(value, exp, dec) + times_ten(exp), sci(sigma), sci(noise), sci(systematic), exp, dec)


def pm_text(value: float, sigma: float, scale: float = 1.0) -> str:
    """``value ± sigma`` (two significant digits of sigma), scaled."""
    v, s = value * scale, sigma * scale
    exp = exponent(v, s)
    dec = decimals(s / 10.0**exp)
    core = f"{scaled(v, exp, dec)} ± {scaled(s, exp, dec)}"
    return f"({core}){times_ten(exp)}" if exp else core


def num(x: Any, fmt: str = ".6g", unit: str = "") -> str:
    """A number for the page (exponents as ``× 10ⁿ``); other values escaped, or a dash."""
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        return esc(x) if x not in (None, "") else "–"
    if not math.isfinite(x):
        return "n/a"
    text = f"{x:{fmt}}"
    if "e" in text and "," not in fmt:
        mant, _, ex = text.partition("e")
        text = mant + times_ten(int(ex))
    if text in ("-0.00", "+0.00", "-0.0", "+0.0"):
        text = text[1:]
    return text.replace("-", "−") + (f" {unit}" if unit else "")


# --------------------------------------------------------------------------------------------
# Building blocks


def table(head: Sequence[str], rows: Sequence[Sequence[str]], cls: str = "") -> str:
    """A table; ``head`` and cells are already HTML (escape run text before passing it)."""
    out = [f'<table class="{cls}">' if cls else "<table>"]
    if head:
        out.append("<thead><tr>" + "".join(f"<th>{h}</th>" for h in head) + "</tr></thead>")
    out.append("<tbody>")
    for row in rows:
        cells = []
        for c in row:
            if isinstance(c, tuple):  # (html, css class)
                cells.append(f'<td class="{c[1]}">{c[0]}</td>')
            else:
                cells.append(f"<td>{c}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</tbody></table>")
    return "\n".join(out)


def kv_table(rows: Sequence[tuple[str, str]]) -> str:
    """A two-column key/value table; values are HTML."""
    body = "".join(f"<tr><th>{esc(k)}</th><td>{v}</td></tr>" for k, v in rows)
    return f'<table class="kv"><tbody>{body}</tbody></table>'


def seconds_text(t: Any) -> str:
    return num(t, ".3f", "s")
