"""Escaping for the three places untrusted text lands: HTML, plotly text and inline JSON."""

from __future__ import annotations

import html

_SCRIPT_UNSAFE = str.maketrans(
    {
        "<": "\\u003c",
        ">": "\\u003e",
        "&": "\\u0026",
        "\u2028": "\\u2028",
        "\u2029": "\\u2029",
    }
)


def esc(value: object) -> str:
    """Text for HTML element content or a quoted attribute value."""
    return html.escape(str(value), quote=True)


def label(value: object) -> str:
    """Text for a plotly title, tick or hover label: plotly reads a few tags, so escape them."""
    return html.escape(str(value), quote=False)


def template_label(value: object) -> str:
    """Text inside a plotly hover template, where "%{" would start a placeholder."""
    return label(value).replace("%", "&#37;")


def script_json(text: str) -> str:
    """JSON text that is safe inside a <script> element.

    The characters replaced can only occur inside JSON strings, where the \\u escapes decode
    to the same text, so the JSON value is unchanged while "</script>" and "<!--" cannot
    appear in the page source.
    """
    return text.translate(_SCRIPT_UNSAFE)
