"""HTML and Markdown renderings of a :class:`~transport.report.document.Report`.

The HTML page is self-contained: inline style, figures as base64 PNG data URIs, no script
and no link to anything outside the file. The Markdown twin shows the same tables and
links the PNG files in ``figures/`` beside it. Numbers are formatted once
(:func:`transport.report.text.format_number`), so both show exactly the merged JSON's
values at the printed precision.
"""

from __future__ import annotations

import base64
import html
from collections.abc import Sequence
from typing import Any

from .document import Report, Row
from .text import format_number

__all__ = ["main_table", "render_html", "render_markdown"]

_MAIN_HEADER = ("quantity", "group", "method", "finite size", "value", "stderr",
                "95% interval", "unit", "window", "n", "source")


def _fmt(x: Any, sig: int = 4) -> str:
    return format_number(None if x is None else float(x), sig)


def _count(n: float | None) -> str:
    if n is None:
        return "-"
    return str(int(n)) if float(n).is_integer() else _fmt(n, 3)


def _row_cells(r: Row) -> tuple[str, ...]:
    e = r.estimate
    lo, hi = e.interval
    win = "-" if e.window is None else (
        f"{_fmt(e.window[0], 3)}–{_fmt(e.window[1], 3)} {e.window_unit}".strip())
    fs = e.corrected or ("periodic box" if e.quantity == "self_diffusion" else "-")
    n = e.n_independent
    return (e.quantity.replace("_", " "), e.group or "-", e.method.replace("_", " "), fs,
            _fmt(e.value), _fmt(e.stderr, 2), f"[{_fmt(lo)}, {_fmt(hi)}]", e.unit, win,
            _count(n), r.source)


def main_table(report: Report) -> list[tuple[str, ...]]:
    """The rows of the main results table (D periodic and corrected, extrapolations,
    viscosity by method, other averages), as printed."""
    rows = [*report.diffusion, *report.extrapolations, *report.viscosity, *report.others]
    return [_row_cells(r) for r in rows]


def _corrections_table(report: Report) -> tuple[tuple[str, ...], list[tuple[str, ...]]]:
    header = ("group", "source", "correction", "D periodic box", "correction size",
              "share of D", "D corrected", "unit", "viscosity used", "xi (same volume cube)",
              "how the viscosity was chosen")
    rows = []
    for c in report.corrections:
        share = c.get("share")
        rows.append((
            c.get("group") or "-", c["source"], str(c.get("name")),
            f"{_fmt(c.get('d_pbc'))} ± {_fmt(c.get('d_pbc_stderr'), 2)}",
            f"{_fmt(c.get('correction'))} ± {_fmt(c.get('correction_stderr'), 2)}",
            "-" if share is None else f"{100 * float(share):.1f}%",
            f"{_fmt(c.get('d_corrected'))} ± {_fmt(c.get('d_corrected_stderr'), 2)}",
            str(c.get("unit")),
            f"{_fmt(c.get('viscosity'))} ± {_fmt(c.get('viscosity_stderr'), 2)} "
            f"{c.get('viscosity_unit') or ''} ({c.get('viscosity_from') or '-'})",
            _fmt(c.get("xi_effective"), 7), str(c.get("pairing")),
        ))
    return header, rows


def _pct(x: Any) -> str:
    try:
        f = float(x)
    except (TypeError, ValueError):
        return "-"
    return f"{f:.1%}" if f == f and abs(f) != float("inf") else "-"


def _more(v: Any) -> str:
    t = v.get("additional_time")
    if t is None:
        return "-"
    if float(t) == 0 and v.get("long_enough"):
        return "none"
    out = f"+{_fmt(t, 3)} {v.get('time_unit') or ''} per run".replace("  ", " ")
    if v.get("wall_clock_hours") is not None:
        out += f" (~{_fmt(v['wall_clock_hours'], 2)} h)"
    if v.get("additional_replicas"):
        out += f" or +{v['additional_replicas']} replica(s)"
    return out


def _verdict_table(report: Report) -> tuple[tuple[str, ...], list[tuple[str, ...]]]:
    """Run-length verdicts (the ``verdicts`` records of ``transport.convergence``)."""
    header = ("source", "quantity", "group", "method", "rel. error", "target", "verdict",
              "more simulation", "reasons")
    rows = []
    for v in report.verdicts:
        le = v.get("long_enough")
        verdict = ("long enough" if le else "too short") if isinstance(le, bool) else str(
            v.get("verdict", "-"))
        reasons = v.get("reasons") or ()
        rows.append((str(v.get("source", "-")), str(v.get("quantity", "-")).replace("_", " "),
                     str(v.get("group") or "-"), str(v.get("method", "-")).replace("_", " "),
                     _pct(v.get("relative_stderr")), _pct(v.get("target_relative_stderr")),
                     verdict, _more(v),
                     "; ".join(map(str, reasons)) if not isinstance(reasons, str)
                     else reasons))
    return header, rows


def _provenance(report: Report) -> list[tuple[str, ...]]:
    rows = []
    for s in report.sources:
        d = s.doc
        rows.append((s.label, str(d.get("command")), str(d.get("version")), s.path,
                     s.sha256))
        for i in d.get("inputs") or ():
            rows.append((s.label, "input", "", str(i.get("path")), str(i.get("sha256"))))
    return rows


def _settings(report: Report) -> list[tuple[str, str]]:
    out = []
    for s in report.sources:
        st = s.doc.get("settings") or {}
        text = "; ".join(f"{k} = {v}" for k, v in st.items() if v is not None)
        out.append((s.label, text or "-"))
    return out


# ---- HTML ---------------------------------------------------------------------------------

_STYLE = """
body { font-family: sans-serif; margin: 2em auto; max-width: 70em; color: #222;
       line-height: 1.4; }
table { border-collapse: collapse; margin: 0.5em 0 1.5em; font-size: 0.9em; }
th, td { border: 1px solid #bbb; padding: 0.25em 0.5em; text-align: left;
         vertical-align: top; }
th { background: #eee; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td.hash { font-family: monospace; font-size: 0.8em; word-break: break-all; }
figure { margin: 1em 0 2em; }
figure img { max-width: 100%; border: 1px solid #ddd; }
figcaption { font-size: 0.9em; color: #444; }
.caution { background: #fff6e0; border-left: 4px solid #e0a000; padding: 0.5em 1em; }
"""

_NUMERIC = {"value", "stderr", "95% interval", "n"}


def _html_table(header: Sequence[str], rows: Sequence[Sequence[str]], *,
                table_id: str | None = None, hash_cols: Sequence[int] = ()) -> str:
    e = html.escape
    ident = f' id="{table_id}"' if table_id else ""
    out = [f"<table{ident}>", "<thead><tr>"
           + "".join(f"<th>{e(h)}</th>" for h in header) + "</tr></thead>", "<tbody>"]
    for r in rows:
        cells = []
        for i, (h, c) in enumerate(zip(header, r, strict=True)):
            cls = ' class="num"' if h in _NUMERIC else (' class="hash"' if i in hash_cols
                                                       else "")
            cells.append(f"<td{cls}>{e(c)}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</tbody></table>")
    return "\n".join(out)


def render_html(report: Report) -> str:
    """The self-contained HTML document."""
    e = html.escape
    parts = [
        "<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
        # no network: forbid every fetch except the embedded data: images
        '<meta http-equiv="Content-Security-Policy" content="default-src \'none\'; '
        'img-src data:; style-src \'unsafe-inline\'">',
        f"<title>{e(report.title)}</title>", f"<style>{_STYLE}</style>", "</head>", "<body>",
        f"<h1>{e(report.title)}</h1>",
        f"<p>Written by transport {e(report.version)} from {len(report.sources)} result "
        "document(s). Every value has its standard error and 95% interval; windows are "
        "the Green–Kubo cutoff (0–t<sub>c</sub>) or the fit window the value rests on.</p>",
        "<h2>Results</h2>",
        _html_table(_MAIN_HEADER, main_table(report), table_id="main-results"),
    ]
    if report.corrections:
        h, rows = _corrections_table(report)
        parts += ["<h2>Finite-size correction of self-diffusion</h2>",
                  "<p>D<sub>inf</sub> = D<sub>pbc</sub> + &xi; k<sub>B</sub>T / (6&pi;&eta;L) "
                  "for a cube (Yeh &amp; Hummer, J. Phys. Chem. B 108, 15873 (2004)); other "
                  "cells from the Oseen lattice sum (Kikugawa, Nakano &amp; Ohara, J. Chem. "
                  "Phys. 143, 024507 (2015)). The correction's error comes from the "
                  "viscosity's, to first order.</p>",
                  _html_table(h, rows, table_id="corrections")]
    if report.verdicts:
        h, rows = _verdict_table(report)
        parts += ["<h2>Run-length verdicts</h2>", _html_table(h, rows, table_id="verdicts")]
    if report.warnings or report.notes:
        parts.append("<h2>Warnings and notes</h2><ul>")
        parts += [f"<li>{e(w)}</li>" for w in report.warnings]
        parts += [f"<li>note: {e(n)}</li>" for n in report.notes]
        parts.append("</ul>")
    if report.figures:
        parts.append("<h2>Figures</h2>")
        for f in report.figures:
            data = base64.b64encode(f.png).decode("ascii")
            parts.append(f'<figure id="fig-{e(f.name)}"><img alt="{e(f.caption)}" '
                         f'src="data:image/png;base64,{data}"><figcaption>{e(f.caption)}'
                         "</figcaption></figure>")
    parts += ['<h2>Cautions</h2><div class="caution"><ul>']
    parts += [f"<li>{e(c)}</li>" for c in report.cautions]
    parts += ["</ul></div>", "<h2>Settings</h2>",
              _html_table(("document", "settings"), _settings(report), table_id="settings"),
              "<h2>Inputs and checksums (SHA-256)</h2>",
              _html_table(("document", "kind", "version", "path", "sha256"),
                          _provenance(report), table_id="inputs", hash_cols=(4,)),
              "</body>", "</html>"]
    return "\n".join(parts) + "\n"


# ---- Markdown -----------------------------------------------------------------------------

def _md_cell(c: str) -> str:
    return c.replace("|", "\\|").replace("\n", " ")


def _md_table(header: Sequence[str], rows: Sequence[Sequence[str]]) -> str:
    out = ["| " + " | ".join(_md_cell(h) for h in header) + " |",
           "|" + "|".join("---" for _ in header) + "|"]
    out += ["| " + " | ".join(_md_cell(c) for c in r) + " |" for r in rows]
    return "\n".join(out)


def render_markdown(report: Report) -> str:
    """The Markdown twin (figures linked as ``figures/NAME.png``)."""
    parts = [f"# {report.title}", "",
             f"Written by transport {report.version} from {len(report.sources)} result "
             "document(s). Every value has its standard error and 95% interval.", "",
             "## Results", "", _md_table(_MAIN_HEADER, main_table(report)), ""]
    if report.corrections:
        h, rows = _corrections_table(report)
        parts += ["## Finite-size correction of self-diffusion", "",
                  "D_inf = D_pbc + xi k_B T / (6 pi eta L) for a cube (Yeh & Hummer, J. Phys. "
                  "Chem. B 108, 15873 (2004)); other cells from the Oseen lattice sum "
                  "(Kikugawa, Nakano & Ohara, J. Chem. Phys. 143, 024507 (2015)).", "",
                  _md_table(h, rows), ""]
    if report.verdicts:
        h, rows = _verdict_table(report)
        parts += ["## Run-length verdicts", "", _md_table(h, rows), ""]
    if report.warnings or report.notes:
        parts += ["## Warnings and notes", ""]
        parts += [f"- {w}" for w in report.warnings]
        parts += [f"- note: {n}" for n in report.notes]
        parts.append("")
    if report.figures:
        parts += ["## Figures", ""]
        for f in report.figures:
            parts += [f"![{f.caption}](figures/{f.name}.png)", "", f"*{f.caption}*", ""]
    parts += ["## Cautions", ""] + [f"- {c}" for c in report.cautions] + [""]
    parts += ["## Settings", "", _md_table(("document", "settings"), _settings(report)), "",
              "## Inputs and checksums (SHA-256)", "",
              _md_table(("document", "kind", "version", "path", "sha256"),
                        _provenance(report)), ""]
    return "\n".join(parts)
