"""HTML pages from the jinja2 templates shipped in templates/ (autoescape on, strict).

Every page the tool writes (the verify report, certificates, lot reports, the explorer's
page) is rendered here, so that escaping and undefined-variable checks are the same for all.
"""

from __future__ import annotations

import base64
import io
from typing import Any

import jinja2

from hosttool.util.resources import templates


def _load(name: str) -> str:
    return templates().joinpath(name).read_text(encoding="utf-8")


_ENV = jinja2.Environment(loader=jinja2.FunctionLoader(_load), undefined=jinja2.StrictUndefined,
                          autoescape=True, trim_blocks=True, lstrip_blocks=True,
                          keep_trailing_newline=True)


def render_page(template: str, **context: Any) -> str:
    """The page ``template`` (a file of templates/) filled with ``context``."""
    return _ENV.get_template(template).render(**context)


def png_data_uri(figure: Any, dpi: int = 96) -> str:
    """A matplotlib figure as a ``data:image/png;base64,...`` URI (the figure is closed)."""
    import matplotlib.pyplot as plt  # deferred: matplotlib only where a page has plots

    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=dpi, bbox_inches="tight")
    plt.close(figure)
    return "data:image/png;base64," + base64.b64encode(buffer.getvalue()).decode("ascii")
