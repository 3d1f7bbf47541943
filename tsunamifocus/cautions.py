"""The one caution text carried by every user-facing output.

The text lives in ``tsunamifocus/data/CAUTIONS.md``, a byte-identical copy of the repository's
top-level ``CAUTIONS.md`` (a test checks that the two agree), so an installed package carries it too.
"""

from __future__ import annotations

from functools import lru_cache
from importlib import resources

__all__ = ["caution_text", "caution_summary", "caution_lines", "CAUTION_SHORT", "CAUTION_FOOTER"]

#: Short caution repeated in the footer of every appendix page and under every appendix figure.
CAUTION_SHORT = "Screening estimate only - not for evacuation decisions; see the Cautions box on page 1"
#: Footer line drawn on every figure (the full text goes into the PNG metadata).
CAUTION_FOOTER = "Screening estimate only - not for evacuation decisions; see CAUTIONS"


@lru_cache(maxsize=1)
def _raw() -> str:
    return resources.files("tsunamifocus").joinpath("data/CAUTIONS.md").read_text(encoding="utf-8")


def caution_text() -> str:
    """Return the full caution text (Markdown, without the ``# Cautions`` heading).

    Returns
    -------
    str
        The text of ``CAUTIONS.md`` with its first-level heading removed and surrounding blank
        lines stripped; line breaks are kept.
    """
    lines = _raw().splitlines()
    if lines and lines[0].startswith("# "):
        lines = lines[1:]
    return "\n".join(lines).strip()


def caution_summary() -> str:
    """Return the first paragraph of the caution text on one line.

    Used where only a short single-line text fits (GeoPackage layer description, raster band
    metadata); the full text is always stored next to it.
    """
    para = caution_text().split("\n\n", 1)[0]
    return " ".join(para.split())


def caution_lines(width: int | None = None) -> list[str]:
    """Return the caution text as lines, for comment headers (CSV, TOML).

    Parameters
    ----------
    width : int, optional
        Re-wrap paragraphs to at most this many characters; the Markdown line breaks are kept
        when None.
    """
    text = caution_text()
    if width is None:
        return text.splitlines()
    import textwrap

    # join soft-wrapped Markdown lines into paragraphs / list items, then re-wrap
    blocks: list[str] = []
    for line in text.splitlines():
        if not line.strip():
            blocks.append("")
        elif line.startswith("- ") or not blocks or blocks[-1] == "" or blocks[-1].endswith(":"):
            blocks.append(line.strip())
        else:
            blocks[-1] += " " + line.strip()
    out: list[str] = []
    for b in blocks:
        if not b:
            out.append("")
            continue
        indent = "  " if b.startswith("- ") else ""
        out.extend(textwrap.wrap(b, width=width, subsequent_indent=indent, break_on_hyphens=False))
    return out
