"""The report: gathers the JSON results of other commands into one document.

Reads only the JSON documents written by ``transport viscosity``, ``diffusion``, ``average``
and the demo (layout in :mod:`transport.report.jsonout`); never opens a raw file. Applies
the one computation that belongs to results: the finite-size correction of self-diffusion
(:mod:`transport.corrections`), pairing a diffusion result with a viscosity result of the
same system (same temperature within 1% and box volume within 2%, or named together), and
the box-size extrapolation when D of one group was measured in boxes of several sizes.

:func:`build_report` is pure (results in, a frozen :class:`Report` out, with figures
rendered to PNG bytes); :func:`write_report` writes ``report.html`` (figures embedded as
base64 PNG, no network needed), ``report.md`` with ``figures/*.png`` beside it, and
``report.json`` (the merged results) into a new folder, atomically.
"""

from __future__ import annotations

import hashlib
import io
import json
import math
import os
import shutil
import tempfile
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InputError
from ..estimate import Estimate, _jsonable
from ..units import is_reduced_unit

__all__ = [
    "CAUTIONS",
    "Figure",
    "Report",
    "ResultDocument",
    "build_report",
    "estimate_from_record",
    "read_documents",
    "write_report",
]

#: The cautions every report carries (common practice of the trade; Maginn et al.,
#: LiveCoMS 1, 6324 (2019) discuss each).
CAUTIONS = (
    "Model dependence: a transport coefficient is only as good as the interatomic "
    "potential and the sampling. A tight error bar says the run was long enough for this "
    "potential, not that the potential is right.",
    "Thermostat coupling biases transport coefficients: strong Langevin or "
    "velocity-rescaling coupling slows or speeds the dynamics. Production runs for "
    "viscosity and diffusion should be NVE or weakly coupled NVT.",
    "Truncated electrostatics (plain cutoffs, reaction field) and a loose Ewald accuracy "
    "add large noise, and bias, to the off-diagonal pressure; the Lennard-Jones cutoff "
    "shifts both coefficients by amounts comparable to the differences between potentials.",
    "D depends on box size, viscosity hardly does: periodic-box D is too small by about "
    "xi k_B T / (6 pi eta L) (Yeh & Hummer 2004). The corrected D leans on the "
    "hydrodynamic model and on the viscosity used; when the correction is a large share "
    "of D, confirm it with a larger box or a box-size extrapolation.",
    "Check against experiment at the same state point before a design decision, and "
    "compare candidate potentials at equal run length with the same analysis settings.",
)

_Z95 = 1.959963984540054


# ---- reading ------------------------------------------------------------------------------

@dataclass(frozen=True)
class ResultDocument:
    """One JSON result document as read: its path, the SHA-256 of its bytes, the content."""

    path: str
    sha256: str
    doc: Mapping[str, Any]

    @property
    def label(self) -> str:
        """A short name: the file name without ``.json``."""
        name = Path(self.path).name
        return name[:-5] if name.endswith(".json") else name


def read_documents(paths: Iterable[str | os.PathLike[str]]) -> list[ResultDocument]:
    """Read JSON result documents; InputError naming the file and line on bad input."""
    out = []
    seen: dict[Path, str] = {}
    for p in paths:
        path = Path(p)
        key = path.resolve()
        if key in seen:
            raise InputError(f"given twice (also as {seen[key]!r})", path=str(p),
                             expected="each result document once",
                             fix="remove the repeated file")
        seen[key] = str(p)
        try:
            raw = path.read_bytes()
        except OSError as exc:
            raise InputError(f"cannot read ({exc.strerror or exc})", path=str(p),
                             expected="a readable JSON result document",
                             fix="check the path and its permissions") from None
        try:
            doc = json.loads(raw.decode("utf-8"))
        except UnicodeDecodeError:
            raise InputError("not UTF-8 text", path=str(p),
                             expected="a JSON document written with --json",
                             fix="give the JSON file written by a transport command") from None
        except json.JSONDecodeError as exc:
            raise InputError(f"not valid JSON ({exc.msg})", path=str(p), line=exc.lineno,
                             expected="a JSON document written with --json",
                             fix="give the JSON file written by a transport command") from None
        if not isinstance(doc, dict) or not isinstance(doc.get("results"), list) \
                or "command" not in doc:
            raise InputError("not a transport result document (no 'command' and "
                             "'results')", path=str(p),
                             expected="a JSON document written with --json",
                             fix="give the JSON file written by a transport command")
        if doc.get("command") == "report":
            raise InputError("is a report's merged JSON, not a command's result",
                             path=str(p), expected="results of viscosity, diffusion, average",
                             fix="give the documents the report was made from")
        for i, rec in enumerate(doc["results"]):
            missing = [k for k in ("quantity", "method", "value", "stderr", "unit")
                       if k not in rec]
            if missing:
                raise InputError(f"result {i + 1} lacks {', '.join(missing)}", path=str(p),
                                 expected="results with quantity, method, value, stderr, unit",
                                 fix="write the document again with the current version")
        out.append(ResultDocument(str(p), hashlib.sha256(raw).hexdigest(), doc))
    if not out:
        raise InputError("no result documents given", expected="one or more JSON files",
                         fix="give the --json outputs of the other commands")
    return out


def _num(x: Any) -> float:
    return float("nan") if x is None else float(x)


def estimate_from_record(rec: Mapping[str, Any],
                         curves: Mapping[str, Any] | None = None) -> Estimate:
    """An :class:`~transport.Estimate` rebuilt from its JSON record (and thinned curves)."""
    iv = rec.get("interval95") or [None, None]
    win = rec.get("window")
    return Estimate(
        rec["quantity"], rec["method"], _num(rec["value"]), _num(rec["stderr"]),
        (_num(iv[0]), _num(iv[1])), rec["unit"],
        window=None if win is None else (_num(win[0]), _num(win[1])),
        window_unit=rec.get("window_unit") or "", group=rec.get("group"),
        corrected=rec.get("corrected"), n_independent=rec.get("n_independent"),
        diagnostics=rec.get("diagnostics") or {},
        curves={k: np.asarray([np.nan if v is None else v for v in vals], dtype=float)
                for k, vals in (curves or {}).items()},
        warnings=tuple(rec.get("warnings") or ()),
    )


def _estimates(d: ResultDocument) -> list[Estimate]:
    curves = d.doc.get("curves") or []
    return [estimate_from_record(r, curves[i] if i < len(curves) else None)
            for i, r in enumerate(d.doc["results"])]


# ---- the report ---------------------------------------------------------------------------

@dataclass(frozen=True)
class Figure:
    """A rendered figure: file stem, caption and PNG bytes."""

    name: str
    caption: str
    png: bytes


@dataclass(frozen=True)
class Row:
    """One estimate in a table, with the label of the document it came from."""

    source: str
    estimate: Estimate


@dataclass(frozen=True)
class Report:
    """Everything the document shows; rendered by :mod:`transport.report.render`."""

    title: str
    version: str
    sources: tuple[ResultDocument, ...]
    diffusion: tuple[Row, ...]
    viscosity: tuple[Row, ...]
    others: tuple[Row, ...]
    corrections: tuple[Mapping[str, Any], ...]
    extrapolations: tuple[Row, ...]
    verdicts: tuple[Mapping[str, Any], ...]
    warnings: tuple[str, ...]
    notes: tuple[str, ...]
    figures: tuple[Figure, ...] = field(default=())
    cautions: tuple[str, ...] = CAUTIONS

    def merged(self) -> dict[str, Any]:
        """The merged JSON document (``command: "report"``)."""
        def rec(r: Row) -> dict[str, Any]:
            return {"source": r.source, **r.estimate.to_record()}

        return _jsonable({
            "version": self.version,
            "command": "report",
            "title": self.title,
            "inputs": [{"path": s.path, "sha256": s.sha256, "command": s.doc.get("command"),
                        "version": s.doc.get("version")} for s in self.sources],
            "warnings": list(self.warnings),
            "notes": list(self.notes),
            "results": [rec(r) for r in (*self.diffusion, *self.extrapolations,
                                         *self.viscosity, *self.others)],
            "corrections": [dict(c) for c in self.corrections],
            "verdicts": [dict(v) for v in self.verdicts],
            "cautions": list(self.cautions),
            "documents": [dict(s.doc, curves=None) for s in self.sources],
            "figures": [{"name": f.name, "caption": f.caption} for f in self.figures],
        })


def _mean(x: Any) -> float | None:
    if x is None:
        return None
    if isinstance(x, (list, tuple)):
        vals = [float(v) for v in x if v is not None]
        return float(np.mean(vals)) if vals else None
    return float(x)


def _viscosity_state(e: Estimate) -> tuple[float | None, float | None]:
    """(temperature, volume in the diffusion's length unit cubed) of a viscosity result."""
    d = e.diagnostics
    t = _mean(d.get("temperature"))
    v = _mean(d.get("volume_mean"))
    if v is not None and not is_reduced_unit(e.unit):
        v *= 1e27  # m^3 -> nm^3
    return t, v


def _close(a: float | None, b: float | None, rel: float) -> bool:
    return a is not None and b is not None and abs(a - b) <= rel * max(abs(a), abs(b))


def _pick_viscosity(rows: Sequence[Row]) -> Estimate | None:
    for method in ("green_kubo", "einstein"):
        for r in rows:
            if r.estimate.method == method and math.isfinite(r.estimate.value):
                return r.estimate
    return None


def _is_primary_d(e: Estimate) -> bool:
    return e.quantity == "self_diffusion" and e.method == "msd_wls" and e.corrected is None


def build_report(documents: Sequence[ResultDocument], *,
                 pairs: Sequence[tuple[str, str]] = (),
                 title: str = "Transport coefficients",
                 figures: bool = True) -> Report:
    """Gather results, apply finite-size corrections and extrapolations, make figures.

    Parameters
    ----------
    documents : sequence of ResultDocument
        From :func:`read_documents`.
    pairs : sequence of (diffusion path, viscosity path)
        Documents named together: the diffusion results of the first are corrected with
        the viscosity of the second (Green–Kubo if present, else Einstein). Other
        diffusion documents are paired automatically when exactly one viscosity document
        has the same temperature (1%) and box volume (2%).
    title : str
        The document's title.
    figures : bool
        Render the figures (False for quick tests of the tables).

    Returns
    -------
    Report
    """
    from .. import __version__
    from ..corrections import correct_diffusion, extrapolate_box_size

    by_path = {Path(d.path).resolve(): d for d in documents}
    warnings: list[str] = []
    notes: list[str] = []
    diff_rows: list[Row] = []
    visc_rows: list[Row] = []
    other_rows: list[Row] = []
    visc_by_doc: dict[str, list[Row]] = {}
    diff_by_doc: dict[str, list[Row]] = {}
    verdicts: list[Mapping[str, Any]] = []
    for d in documents:
        if d.doc.get("version") not in (None, __version__):
            notes.append(f"{d.label} was written by version {d.doc.get('version')} "
                         f"(this report: {__version__})")
        for w in d.doc.get("warnings") or ():
            warnings.append(f"{d.label}: {w}")
        for e in _estimates(d):
            row = Row(d.label, e)
            if e.quantity == "shear_viscosity":
                visc_rows.append(row)
                visc_by_doc.setdefault(d.path, []).append(row)
            elif e.quantity == "self_diffusion":
                diff_rows.append(row)
                diff_by_doc.setdefault(d.path, []).append(row)
            else:
                other_rows.append(row)
        verdicts.extend(_verdicts_of(d))

    # ---- pairing and corrections ----
    named: dict[str, str] = {}
    for dp, vp in pairs:
        dd, vd = by_path.get(Path(dp).resolve()), by_path.get(Path(vp).resolve())
        if dd is None or vd is None:
            raise InputError(f"pair {dp}={vp} names a file that is not among the inputs",
                             expected="both files also given as inputs",
                             fix="add the file to the inputs or correct the pair")
        if vd.path not in visc_by_doc:
            raise InputError("has no viscosity result to pair with", path=vp,
                             expected="a viscosity result document",
                             fix="name the viscosity document second: DIFFUSION=VISCOSITY")
        named[dd.path] = vd.path
    corrections: list[Mapping[str, Any]] = []
    corrected_rows: list[Row] = []
    for path, rows in diff_by_doc.items():
        if any(r.estimate.corrected for r in rows):
            for r in rows:
                if r.estimate.corrected:
                    corrections.append(_correction_record(r, "computed by the diffusion "
                                                          "command"))
            continue
        primary = [r for r in rows if _is_primary_d(r.estimate)]
        if not primary:
            continue
        label = primary[0].source
        if path in named:
            vpath = named[path]
            how = f"named together with {Path(vpath).name}"
        else:
            first = primary[0].estimate.diagnostics
            t_d, v_d = first.get("temperature"), first.get("box_volume")
            reduced_d = is_reduced_unit(primary[0].estimate.unit)
            matches = [vp for vp, vr in visc_by_doc.items()
                       if is_reduced_unit(vr[0].estimate.unit) == reduced_d
                       and _close(_viscosity_state(vr[0].estimate)[0], t_d, 0.01)
                       and _close(_viscosity_state(vr[0].estimate)[1], v_d, 0.02)]
            if len(matches) != 1:
                if matches:
                    names = ", ".join(Path(m).name for m in matches)
                    notes.append(f"{label}: not corrected for the box size: several viscosity "
                                 f"results match its temperature and box ({names}); name "
                                 "the pair")
                else:
                    notes.append(f"{label}: not corrected for the box size: no viscosity "
                                 "result of the same temperature and box volume")
                continue
            vpath = matches[0]
            how = (f"matched with {Path(vpath).name} by temperature (1%) and box volume "
                   "(2%)")
        eta = _pick_viscosity(visc_by_doc[vpath])
        if eta is None:
            notes.append(f"{label}: the paired viscosity document has no usable value")
            continue
        for r in primary:
            try:
                c = correct_diffusion(r.estimate, eta)
            except ValueError as exc:
                notes.append(f"{label} ({r.estimate.group or 'all'}): not corrected: {exc}")
                continue
            row = Row(r.source, c)
            corrected_rows.append(row)
            corrections.append(_correction_record(row, how))
    # corrected entries beside the periodic-box ones
    ordered: list[Row] = []
    for r in diff_rows:
        ordered.append(r)
        ordered.extend(c for c in corrected_rows
                       if c.source == r.source and c.estimate.group == r.estimate.group
                       and _is_primary_d(r.estimate))

    # ---- box-size extrapolation ----
    extrapolations: list[Row] = []
    groups: dict[tuple, list[Estimate]] = {}
    for r in diff_rows:
        if _is_primary_d(r.estimate) and r.estimate.diagnostics.get("box_lengths"):
            groups.setdefault((r.estimate.group, r.estimate.unit), []).append(r.estimate)
    for (group, _unit), ests in groups.items():
        vols = {round(float(e.diagnostics.get("box_volume") or 0.0), 6) for e in ests}
        if len(vols) < 2:
            continue
        temp = _mean([e.diagnostics.get("temperature") for e in ests])
        gk = [r.estimate for r in visc_rows if r.estimate.method == "green_kubo"
              and _close(_viscosity_state(r.estimate)[0], temp, 0.01)]
        try:
            ext = extrapolate_box_size(ests, green_kubo=gk[0] if len(gk) == 1 else None)
        except ValueError as exc:
            notes.append(f"{group or 'all'}: no box-size extrapolation: {exc}")
            continue
        extrapolations.append(Row(f"{len(ests)} boxes", ext.diffusion))
        if ext.viscosity is not None:
            extrapolations.append(Row(f"{len(ests)} boxes ({group or 'all'})",
                                      ext.viscosity))
        warnings.extend(f"box-size extrapolation ({group or 'all'}): {w}"
                        for w in ext.warnings)

    for rows in (ordered, visc_rows, other_rows, extrapolations):
        for r in rows:
            warnings.extend(f"{r.source}: {w}" for w in r.estimate.warnings)
    report = Report(
        title=title, version=__version__, sources=tuple(documents),
        diffusion=tuple(ordered), viscosity=tuple(visc_rows), others=tuple(other_rows),
        corrections=tuple(corrections), extrapolations=tuple(extrapolations),
        verdicts=tuple(verdicts), warnings=tuple(dict.fromkeys(warnings)),
        notes=tuple(dict.fromkeys(notes)),
    )
    if figures:
        from .summary_plots import report_figures

        report = _with_figures(report, report_figures(report, documents))
    return report


def _with_figures(report: Report, figs: Sequence[Figure]) -> Report:
    from dataclasses import replace

    return replace(report, figures=tuple(figs))


def _correction_record(row: Row, how: str) -> dict[str, Any]:
    e = row.estimate
    d = e.diagnostics
    return {
        "source": row.source, "group": e.group, "name": e.corrected,
        "d_pbc": d.get("d_pbc"), "d_pbc_stderr": d.get("d_pbc_stderr"),
        "correction": d.get("correction"), "correction_stderr": d.get("correction_stderr"),
        "share": d.get("correction_share"), "d_corrected": e.value,
        "d_corrected_stderr": e.stderr, "unit": e.unit,
        "viscosity": d.get("viscosity_used"), "viscosity_stderr": d.get("viscosity_stderr_used"),
        "viscosity_unit": d.get("viscosity_unit"), "viscosity_from": d.get("viscosity_from"),
        "temperature": d.get("temperature_used"), "xi_effective": d.get("xi_effective"),
        "box_lengths": d.get("box_lengths"), "box_angles": d.get("box_angles"),
        "length_unit": d.get("length_unit"), "pairing": how,
    }


def _verdicts_of(d: ResultDocument) -> list[Mapping[str, Any]]:
    """Run-length verdicts, when a document carries them (``verdicts`` list or a
    ``verdict`` mapping at the top level, or ``verdict`` in a result's diagnostics)."""
    out: list[Mapping[str, Any]] = []
    top = d.doc.get("verdicts")
    if isinstance(top, list):
        out.extend({"source": d.label, **v} for v in top if isinstance(v, Mapping))
    one = d.doc.get("verdict")
    if isinstance(one, Mapping):
        out.append({"source": d.label, **one})
    for r in d.doc["results"]:
        v = (r.get("diagnostics") or {}).get("verdict")
        if isinstance(v, Mapping):
            out.append({"source": d.label, "quantity": r["quantity"], "method": r["method"],
                        **v})
        elif isinstance(v, str):
            out.append({"source": d.label, "quantity": r["quantity"], "method": r["method"],
                        "verdict": v})
    return out


def figure_png(fig: Any, dpi: int = 110) -> bytes:
    """PNG bytes of a matplotlib figure."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()


# ---- writing -------------------------------------------------------------------------------

_MARKER = "report.json"


def check_output_folder(out: str | os.PathLike[str], inputs: Iterable[str]) -> Path:
    """Refuse an output folder that holds an input, is a file, or holds other things.

    An existing folder is accepted when it is empty or holds a previous report (its
    ``report.json`` says ``command: report``); it is replaced as a whole.
    """
    target = Path(out).resolve()
    for p in inputs:
        rp = Path(p).resolve()
        if rp == target or target in rp.parents:
            raise InputError(
                f"the output folder {str(out)!r} holds this input", path=str(p),
                expected="an output folder apart from the inputs",
                fix="give another --out folder (the report replaces its folder as a whole)")
    if target.exists():
        if not target.is_dir():
            raise InputError(f"{str(out)!r} is a file", expected="a folder for the report",
                             fix="give another --out path")
        entries = list(target.iterdir())
        if entries:
            marker = target / _MARKER
            ok = False
            if marker.is_file():
                try:
                    ok = json.loads(marker.read_text(encoding="utf-8")).get(
                        "command") == "report"
                except (OSError, ValueError, AttributeError):
                    ok = False
            if not ok:
                raise InputError(
                    f"the output folder {str(out)!r} exists and is not a previous report",
                    expected="a new or empty folder, or one holding a report",
                    fix="give a new --out folder; nothing was written")
    return target


def write_report(report: Report, out: str | os.PathLike[str]) -> Path:
    """Write ``report.html``, ``report.md``, ``figures/*.png`` and ``report.json`` into the
    folder `out`, atomically: everything goes into a temporary folder beside it, which is
    then renamed (a previous report there is replaced only after the new one is complete).

    Returns the path of the HTML document.
    """
    from .jsonout import dumps
    from .render import render_html, render_markdown

    target = check_output_folder(out, [s.path for s in report.sources])
    target.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.", dir=target.parent))
    old: Path | None = None
    try:
        (tmp / "figures").mkdir()
        for f in report.figures:
            (tmp / "figures" / f"{f.name}.png").write_bytes(f.png)
        (tmp / "report.html").write_text(render_html(report), encoding="utf-8")
        (tmp / "report.md").write_text(render_markdown(report), encoding="utf-8")
        (tmp / _MARKER).write_text(dumps(report.merged()), encoding="utf-8")
        os.chmod(tmp, 0o755)
        if target.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{target.name}.old.", dir=target.parent))
            os.rename(target, old / "previous")
        os.rename(tmp, target)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        if old is not None and (old / "previous").exists() and not target.exists():
            os.rename(old / "previous", target)
        raise
    finally:
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
    return target / "report.html"
