"""Render a result's LaTeX ``formula`` offline, with matplotlib's mathtext (no TeX, no network).

Mathtext covers most of what ``sympy.latex`` prints.  For the few commands it
lacks, :func:`mathtext_source` rewrites them to equivalents (``\\operatorname``
and ``\\text`` to ``\\mathrm``, fixed-size delimiters ``\\big``/``\\Big`` dropped,
``\\left``/``\\right`` dropped when mathtext
refuses them); if the formula still cannot be parsed, :func:`render_formula`
says so and the report shows the LaTeX source instead of a picture.

References
----------
.. [1] Matplotlib documentation, "Writing mathematical expressions" (mathtext).
"""

from __future__ import annotations

import io
import re
from dataclasses import dataclass

from matplotlib import mathtext, rc_context

__all__ = ["RenderedFormula", "mathtext_source", "render_formula"]


@dataclass(frozen=True)
class RenderedFormula:
    """A formula picture: ``data`` (SVG text or PNG bytes), the source used, and whether it rendered."""

    latex: str
    source: str
    fmt: str
    data: bytes | str | None
    ok: bool
    message: str = ""


_REWRITES = (
    (re.compile(r"\\operatorname\{([^{}]*)\}"), r"\\mathrm{\1}"),
    (re.compile(r"\\text\{([^{}]*)\}"), r"\\mathrm{\1}"),
    (re.compile(r"\\mathbf\{([^{}]*)\}"), r"\\mathbf{\1}"),
    (re.compile(r"\\displaystyle\s*"), ""),
    (re.compile(r"\\(?:Bigg|bigg|Big|big)[lrm]?(?![a-zA-Z])\s*"), ""),
    (re.compile(r"\\!"), ""),
    (re.compile(r"\\le(?![a-zA-Z])"), r"\\leq"),
    (re.compile(r"\\ge(?![a-zA-Z])"), r"\\geq"),
    (re.compile(r"\\limits"), ""),
    (re.compile(r"\\quad"), r"\\ \\ "),
)


def mathtext_source(latex: str, aggressive: bool = False) -> str:
    """``latex`` adapted to mathtext; ``aggressive`` also drops ``\\left``/``\\right`` sizing."""
    s = latex.strip()
    if s.startswith("$") and s.endswith("$"):
        s = s.strip("$")
    for pat, rep in _REWRITES:
        s = pat.sub(rep, s)
    if aggressive:
        s = re.sub(r"\\left\s*\\?([(\[{|.]|\\lfloor|\\lceil)", lambda m: "" if m.group(1) == "." else m.group(1), s)
        s = re.sub(r"\\right\s*\\?([)\]}|.]|\\rfloor|\\rceil)", lambda m: "" if m.group(1) == "." else m.group(1), s)
        s = s.replace(r"\left", "").replace(r"\right", "")
    return s


def _try(source: str, fmt: str, fontsize: float, dpi: int):
    from matplotlib.font_manager import FontProperties
    buf = io.BytesIO()
    with rc_context({"mathtext.fontset": "dejavuserif", "svg.fonttype": "path", "svg.hashsalt": "finitekey"}):
        mathtext.math_to_image(f"${source}$", buf, prop=FontProperties(size=fontsize), dpi=dpi, format=fmt,
                               color="#3a2c7a")
    data = buf.getvalue()
    return data.decode("utf-8") if fmt == "svg" else data


def render_formula(latex: str, fmt: str = "svg", fontsize: float = 15.0, dpi: int = 120) -> RenderedFormula:
    """Render ``latex`` as SVG text or PNG bytes; never raises for an unsupported command.

    Returns
    -------
    RenderedFormula
        ``ok`` False (and ``data`` None) when mathtext cannot parse even the
        rewritten source; ``message`` says why.
    """
    if not latex or not latex.strip():
        return RenderedFormula(latex, "", fmt, None, False, "no formula given")
    last = ""
    for aggressive in (False, True):
        src = mathtext_source(latex, aggressive)
        try:
            return RenderedFormula(latex, src, fmt, _try(src, fmt, fontsize, dpi), True)
        except (ValueError, RuntimeError) as exc:
            lines = [ln.strip() for ln in str(exc).splitlines() if ln.strip()]
            last = lines[-1] if lines else type(exc).__name__
    return RenderedFormula(latex, src, fmt, None, False, f"mathtext could not parse the formula: {last}")
