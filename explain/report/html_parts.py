"""Small HTML builders shared by the report page's sections; every value is escaped."""

from __future__ import annotations

import html
import math

__all__ = ["e", "num", "vec", "table", "td"]


def e(value):
    return html.escape(str(value), quote=True)


def num(value, fmt=".4g"):
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "&ndash;"
    return e(format(value, fmt))


def vec(values, fmt=".1f"):
    if values is None:
        return "&ndash;"
    return "(" + ", ".join(num(v, fmt) for v in values) + ")"


def table(header, rows, *, classes=None):
    head = "".join(f"<th>{e(h)}</th>" for h in header)
    body = []
    for index, row in enumerate(rows):
        cls = f' class="{classes[index]}"' if classes and classes[index] else ""
        body.append(f"<tr{cls}>" + "".join(row) + "</tr>")
    return f'<div class="wide"><table><tr>{head}</tr>{"".join(body)}</table></div>'


def td(text, numeric=False):
    return f'<td class="n">{text}</td>' if numeric else f"<td>{text}</td>"
