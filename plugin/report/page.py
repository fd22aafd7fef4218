"""Rendering a report page from its template, and writing it to disk.

A page is rendered from ``templates/<name>.html.j2`` with jinja2 (HTML
autoescaping on) and carries, besides the visible tables and plots, one
machine-readable block ``<script type="application/json" id="fieldcast-data">``
with the numbers the page shows, so a run can be checked or compared with
another without parsing tables. Pages hold no timestamps or random ids:
the same inputs give the same bytes.
"""
from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

from ...algorithms import json_ready

TEMPLATE_DIR = Path(__file__).resolve().parent / "templates"


class ReportError(ValueError):
    """A report cannot be written; the message says what to change."""


def script_json(data: Any) -> str:
    """JSON text safe to place inside a ``<script>`` element.

    Keys are sorted so the text is reproducible; every ``<`` is written
    ``\\u003c`` (the same string to a JSON parser) so no value can close the
    element or open an HTML comment in it.
    """
    text = json.dumps(json_ready(data), sort_keys=True, allow_nan=False, ensure_ascii=False, separators=(",", ":"))
    return text.replace("<", "\\u003c")


def format_number(value: Any, digits: int = 4) -> str:
    """Short text for a number: ``digits`` significant figures, whole thousands without exponent.

    None, NaN and infinity show as an en dash.
    """
    if value is None:
        return "\u2013"
    number = float(value)
    if not math.isfinite(number):
        return "\u2013"
    if number == round(number) and 1e4 <= abs(number) < 1e12:
        return f"{number:,.0f}"
    return f"{number:.{digits}g}"


def render(template_name: str, context: dict[str, Any]) -> str:
    """Render ``templates/<template_name>`` with ``context``.

    jinja2 is imported here, not at module import, so loading the plugin
    does not pay for it.
    """
    import jinja2

    environment = jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(TEMPLATE_DIR)),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
        keep_trailing_newline=True,
    )
    environment.filters["num"] = format_number
    environment.filters["script_json"] = script_json
    return environment.get_template(template_name).render(**context)
