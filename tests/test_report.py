"""The report stage: figures checked on their data, the document's numbers against its JSON,
the finite-size correction applied to paired results, atomic writing and refusals.

Sources of the checks: the Yeh–Hummer formula D_inf = D_pbc + xi k_B T/(6 pi eta L),
xi = 2.837297 (Yeh & Hummer, J. Phys. Chem. B 108, 15873 (2004)), evaluated here in plain
arithmetic; the Einstein (Helfand) slope equals the viscosity (Helfand, Phys. Rev. 119, 1
(1960)), so the plotted moment must rise with the estimate's slope.
"""

from __future__ import annotations

import json
import math
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from matplotlib.collections import PolyCollection

from transport.diffusion import analyse_diffusion
from transport.errors import InputError
from transport.estimate import Estimate
from transport.io.trajectory import positions_from_arrays
from transport.report.document import (
    CAUTIONS,
    build_report,
    estimate_from_record,
    read_documents,
    write_report,
)
from transport.report.jsonout import build_document, write_json
from transport.report.render import main_table
from transport.report.text import format_number
from transport.report.viscosity_plots import einstein_plot_scale, viscosity_figure
from transport.series import StressSeries
from transport.synthetic import OUStressModel, brownian_positions
from transport.viscosity import analyse_viscosity

KB = 1.380649e-23  # J/K, exact (2019 SI)
T = 300.0
BOX_NM = 3.0
VOLUME = (BOX_NM * 1e-9) ** 3
ETA = 0.9e-3  # Pa s


@pytest.fixture(scope="module")
def viscosity_result():
    # SI input (Pa, s): the Einstein curve's units were wrong exactly here (real units)
    rng = np.random.default_rng(1301)
    model = OUStressModel.for_viscosity(ETA, VOLUME, KB * T, times=[0.2e-12, 1.0e-12],
                                        fractions=[0.4, 0.6])
    dt = 5e-15
    runs = [StressSeries(model.sample(40_000, dt, rng), dt, VOLUME, T, "si")
            for _ in range(3)]
    return analyse_viscosity(runs, method="both")


@pytest.fixture(scope="module")
def diffusion_result():
    rng = np.random.default_rng(1302)
    box = BOX_NM * 1e-9
    x = brownian_positions(400, 60, 1e-12, 2.0e-9, box, rng)  # D = 2e-9 m^2/s
    s = positions_from_arrays(x, [box] * 3, 1e-12, units="si", temperature=T)
    return analyse_diffusion(s, remove_drift=False, vacf="no")


@pytest.fixture(scope="module")
def documents(tmp_path_factory, viscosity_result, diffusion_result):
    folder = tmp_path_factory.mktemp("results")
    vpath, dpath = folder / "visc.json", folder / "diff.json"
    write_json(build_document("viscosity", inputs=[], settings={"method": "both"},
                              results=viscosity_result.estimates), vpath)
    write_json(build_document("diffusion", inputs=[], settings={"group_by": "atom"},
                              results=diffusion_result.estimates,
                              warnings=diffusion_result.notes), dpath)
    return folder, vpath, dpath


# ---- figures checked on their data ------------------------------------------------------------

def _span_x(patch) -> tuple[float, float]:
    """x extent of an axvspan patch (a Rectangle in recent matplotlib, a Polygon before)."""
    if hasattr(patch, "get_width"):
        x0 = float(patch.get_x())
        return x0, x0 + float(patch.get_width())
    xs = np.asarray(patch.get_xy())[:, 0]
    return float(xs.min()), float(xs.max())


def _line(ax, prefix: str):
    return next(ln for ln in ax.get_lines() if str(ln.get_label()).startswith(prefix))


def _check_einstein_axis(ax, ein: Estimate, rel: float = 1e-6) -> None:
    data = _line(ax, "V/(2")
    fit = _line(ax, "slope")
    t, y = (np.asarray(v, dtype=float) for v in data.get_data())
    w0, w1 = ein.window
    k = (t >= w0) & (t <= w1)
    # the moment drawn rises with the estimate's slope over the window (Helfand): the
    # value is the mean of per-piece slopes = the slope of the mean curve (linear), so
    # agreement is to rounding on the full curve (`rel` is looser for thinned curves)
    assert np.polyfit(t[k], y[k], 1)[0] == pytest.approx(ein.value, rel=rel)
    # the fit line lies on the data (the bug: data flat at ~1e-10, line at -75..+75)
    tf, yf = (np.asarray(v, dtype=float) for v in fit.get_data())
    assert np.max(np.abs(yf - np.interp(tf, t, y))) < 0.05 * np.ptp(y[k])
    assert ax.get_ylabel() == f"Helfand moment ({ein.unit} {ein.window_unit})"
    assert ax.get_xlabel() == f"time ({ein.window_unit})"
    # fit window shaded exactly, and a standard-error band around the curve
    spans = [p for p in ax.patches if "fit window" in str(p.get_label())]
    assert len(spans) == 1
    assert _span_x(spans[0]) == pytest.approx((w0, w1))
    bands = [c for c in ax.collections if isinstance(c, PolyCollection)
             and "standard error" in str(c.get_label())]
    assert len(bands) == 1
    verts = bands[0].get_paths()[0].vertices
    assert np.nanmax(verts[:, 1]) >= np.nanmax(y) and np.nanmin(verts[:, 1]) <= np.nanmin(y)


def test_einstein_panel_in_real_units(viscosity_result):
    ein = viscosity_result.einstein
    # the estimator stores the moment in mPa s x s and time in ps: a factor 1e12 exactly
    assert einstein_plot_scale(ein) == 1e12
    fig = viscosity_figure(viscosity_result.green_kubo, ein)
    _check_einstein_axis(fig.axes[3], ein)
    # the truth is inside the interval in most draws; here we check the plot is in range
    assert ein.value == pytest.approx(ETA * 1e3, rel=0.5)


def test_figures_from_thinned_json_curves(documents, viscosity_result):
    _, vpath, _ = documents
    doc = json.loads(vpath.read_text())
    ests = [estimate_from_record(r, c) for r, c in zip(doc["results"], doc["curves"],
                                                        strict=True)]
    gk = next(e for e in ests if e.method == "green_kubo")
    ein = next(e for e in ests if e.method == "einstein")
    assert len(ein.curves["time"]) <= 610  # thinned (600 + the ends)
    assert gk.value == viscosity_result.green_kubo.value  # JSON keeps full precision
    fig = viscosity_figure(gk, ein)
    # thinned points sit unevenly in the window, and the mean moment is not exactly
    # straight: the least-squares slope of the points moves by ~1e-4 relative
    _check_einstein_axis(fig.axes[3], ein, rel=2e-3)


def test_green_kubo_panels_carry_units_cutoff_and_band(viscosity_result):
    gk = viscosity_result.green_kubo
    fig = viscosity_figure(gk, None)
    a0, a1, a2 = fig.axes
    cut = gk.window[1]
    for ax in (a0, a1, a2):
        xs = [ln.get_xdata()[0] for ln in ax.get_lines() if str(ln.get_label()).startswith(
            "cutoff")]
        assert xs and xs[0] == pytest.approx(cut)  # the cutoff is drawn where it is
        assert "(ps)" in ax.get_xlabel()
    assert a0.get_ylabel() == "running integral (mPa s)"
    assert a2.get_ylabel() == "σ (mPa s)"
    band = next(c for c in a0.collections if "standard error" in str(c.get_label()))
    # the band is the standard error of the mean running integral: its half-width at the
    # last lag is std/sqrt(pieces)
    top = band.get_paths()[0].vertices[:, 1].max()
    mean = np.asarray(gk.curves["running_integral"])
    half = np.asarray(gk.curves["running_integral_std"]) / math.sqrt(gk.n_independent)
    assert top == pytest.approx(float(np.max(mean + half)), rel=1e-9)
    # Bartlett band about zero in the ACF panel: 1.96 / sqrt(N) at the first lag
    bb = next(c for c in a1.collections if "Bartlett" in str(c.get_label()))
    n_samples = gk.diagnostics["pieces"] * gk.diagnostics["segment_length"] / (
        gk.curves["time"][1] - gk.curves["time"][0])
    lo = bb.get_paths()[0].vertices[:, 1]
    assert np.min(lo) < 0 < np.max(lo)
    assert np.max(lo) >= 1.96 / math.sqrt(n_samples) * (1 - 1e-9)


def test_diffusion_figure_has_window_band_and_units(diffusion_result):
    from transport.report.diffusion_plots import diffusion_figure

    e = diffusion_result.msd[0]
    fig = diffusion_figure(diffusion_result.msd, ())
    a_log, a_slope, a_lin = fig.axes[0], fig.axes[2], fig.axes[1]
    span = next(p for p in a_log.patches if "fit window" in str(p.get_label()))
    assert _span_x(span) == pytest.approx(e.window)
    assert a_log.get_ylabel() == f"MSD ({e.diagnostics['msd_unit']})"
    assert "(ps)" in a_log.get_xlabel() and "(ps)" in a_lin.get_xlabel()
    assert any(isinstance(c, PolyCollection) for c in a_log.collections)  # MSD +- sd
    assert len([c for c in a_lin.collections if isinstance(c, PolyCollection)]) >= 2
    assert "d log MSD / d log t" in a_slope.get_ylabel()


# ---- the document ------------------------------------------------------------------------------

class _Tables(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.tables: dict[str, list[list[str]]] = {}
        self.images: list[str] = []
        self._id: str | None = None
        self._cell: list[str] | None = None
        self._row: list[str] | None = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "table":
            self._id = a.get("id")
            self.tables[self._id] = []
        elif tag == "tr" and self._id is not None:
            self._row = []
        elif tag in ("td", "th") and self._row is not None:
            self._cell = []
        elif tag == "img":
            self.images.append(a.get("src", ""))

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None:
            self._row.append("".join(self._cell))
            self._cell = None
        elif tag == "tr" and self._row is not None:
            self.tables[self._id].append(self._row)
            self._row = None
        elif tag == "table":
            self._id = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)


@pytest.fixture(scope="module")
def written(documents, tmp_path_factory):
    _folder, vpath, dpath = documents
    out = tmp_path_factory.mktemp("report") / "report"
    rep = build_report(read_documents([vpath, dpath]))
    html_path = write_report(rep, out)
    return rep, out, html_path


def test_report_numbers_equal_the_json(written):
    rep, out, html_path = written
    merged = json.loads((out / "report.json").read_text())
    parser = _Tables()
    parser.feed(html_path.read_text())
    rows = parser.tables["main-results"][1:]
    assert len(rows) == len(merged["results"]) == len(main_table(rep))
    for row, rec in zip(rows, merged["results"], strict=True):
        assert row[4] == format_number(rec["value"])
        assert row[5] == format_number(rec["stderr"], 2)
        lo, hi = rec["interval95"]
        assert row[6] == f"[{format_number(lo)}, {format_number(hi)}]"
        assert row[7] == rec["unit"]
    # the Markdown twin shows the same rows
    md = (out / "report.md").read_text()
    for row in rows:
        assert "| " + " | ".join(c.replace("|", "\\|") for c in row) + " |" in md


def test_report_corrects_paired_diffusion_with_yeh_hummer(written, viscosity_result,
                                                          diffusion_result):
    _rep, out, _ = written
    merged = json.loads((out / "report.json").read_text())
    corrected = [r for r in merged["results"] if r["corrected"] == "yeh_hummer"]
    periodic = diffusion_result.msd[0]
    assert len(corrected) == 1
    gk = viscosity_result.green_kubo
    # independent evaluation: xi k_B T / (6 pi eta L) in SI, then to 1e-9 m^2/s
    corr = 2.837297 * KB * T / (6 * math.pi * gk.value * 1e-3 * BOX_NM * 1e-9) * 1e9
    c = corrected[0]
    assert c["value"] == pytest.approx(periodic.value + corr, rel=1e-6)  # box rounding
    assert c["diagnostics"]["correction"] == pytest.approx(corr, rel=1e-6)
    se = math.hypot(periodic.stderr, corr * gk.stderr / gk.value)
    assert c["stderr"] == pytest.approx(se, rel=1e-6)
    assert merged["corrections"][0]["share"] == pytest.approx(corr / c["value"], rel=1e-6)
    assert "matched with visc.json" in merged["corrections"][0]["pairing"]


def test_document_is_self_contained_with_cautions_and_checksums(written):
    rep, out, html_path = written
    text = html_path.read_text()
    parser = _Tables()
    parser.feed(text)
    assert parser.images and all(s.startswith("data:image/png;base64,")
                                 for s in parser.images)
    assert len(parser.images) == len(rep.figures) >= 4  # 2 summaries + 2 diagnostics
    assert "http://" not in text and "https://" not in text
    md = (out / "report.md").read_text()
    for f in rep.figures:
        assert (out / "figures" / f"{f.name}.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        assert f"(figures/{f.name}.png)" in md
    for c in CAUTIONS:
        assert c in md
        assert c.replace("&", "&amp;") in text or c in text
    for s in rep.sources:
        assert s.sha256 in text and s.sha256 in md
    assert "Run-length verdicts" not in text  # none given


def test_writing_is_atomic_and_refuses_unsafe_folders(documents, tmp_path, monkeypatch):
    folder, vpath, dpath = documents
    rep = build_report(read_documents([vpath, dpath]), figures=False)
    # an output folder that holds an input
    with pytest.raises(InputError, match="holds this input"):
        write_report(rep, folder)
    # an existing folder that is not a report: refused, untouched
    other = tmp_path / "other"
    other.mkdir()
    (other / "keep.txt").write_text("x")
    with pytest.raises(InputError, match="not a previous report"):
        write_report(rep, other)
    assert sorted(p.name for p in other.iterdir()) == ["keep.txt"]
    # a previous report is replaced; a failure while writing leaves it as it was
    out = tmp_path / "rep"
    write_report(rep, out)
    before = (out / "report.json").read_bytes()

    import transport.report.render as render

    def boom(report):
        raise RuntimeError("disk full (simulated)")

    monkeypatch.setattr(render, "render_markdown", boom)
    with pytest.raises(RuntimeError):
        write_report(rep, out)
    assert (out / "report.json").read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["other", "rep"]  # no leftovers


def test_bad_inputs_are_one_line_errors(tmp_path, documents):
    bad = tmp_path / "bad.json"
    bad.write_text('{"command": "viscosity",\n "results": [1,\n')
    with pytest.raises(InputError, match=r"bad.json:3: not valid JSON"):
        read_documents([bad])
    plain = tmp_path / "plain.json"
    plain.write_text('{"a": 1}')
    with pytest.raises(InputError, match="not a transport result document"):
        read_documents([plain])
    _, vpath, _ = documents
    with pytest.raises(InputError, match="given twice"):
        read_documents([vpath, vpath])


def _d_doc(path: Path, value: float, box: float, temperature: float = 298.0,
           group: str = "SOL") -> Path:
    e = Estimate("self_diffusion", "msd_gls", value, 0.01, (value - 0.0196, value + 0.0196),
                 "1e-9 m^2/s", group=group,
                 diagnostics={"box_lengths": [box] * 3, "box_volume": box**3,
                              "length_unit": "nm", "temperature": temperature})
    write_json(build_document("diffusion", inputs=[], settings={}, results=[e]), path)
    return path


def _v_doc(path: Path, value: float, box: float, temperature: float = 298.0) -> Path:
    e = Estimate("shear_viscosity", "green_kubo", value, 0.02, (value - 0.04, value + 0.04),
                 "mPa s", diagnostics={"temperature": [temperature],
                                       "volume_mean": [(box * 1e-9) ** 3]})
    write_json(build_document("viscosity", inputs=[], settings={}, results=[e]), path)
    return path


def test_pairing_ambiguous_named_and_box_size_extrapolation(tmp_path):
    # three cubic boxes of TIP4P/2005-like water: D(L) = 2.30 - xi kT/(6 pi eta L) exactly
    paths = []
    for n, box in ((216, 1.8644), (512, 2.4859), (1000, 3.1074)):
        corr = 2.837297 * KB * 298.0 / (6 * math.pi * 0.855e-3 * box * 1e-9) * 1e9
        paths.append(_d_doc(tmp_path / f"d{n}.json", 2.30 - corr, box))
    va = _v_doc(tmp_path / "va.json", 0.855, 3.1074)
    vb = _v_doc(tmp_path / "vb.json", 0.86, 3.1074)
    rep = build_report(read_documents([*paths, va, vb]), figures=False)
    # two viscosity documents match the largest box: not corrected, a note says why
    assert any("several viscosity results match" in n for n in rep.notes)
    ext = [r.estimate for r in rep.extrapolations if r.estimate.quantity == "self_diffusion"]
    assert len(ext) == 1 and ext[0].value == pytest.approx(2.30, abs=1e-6)
    eta = [r.estimate for r in rep.extrapolations if r.estimate.quantity == "shear_viscosity"]
    assert eta[0].value == pytest.approx(0.855, rel=1e-5)
    # named together: corrected with the named one
    rep2 = build_report(read_documents([paths[2], va, vb]), pairs=[(paths[2], vb)],
                        figures=False)
    c = [r.estimate for r in rep2.diffusion if r.estimate.corrected]
    assert len(c) == 1 and c[0].diagnostics["viscosity_used"] == 0.86
    with pytest.raises(InputError, match="not among the inputs"):
        build_report(read_documents([paths[2], va]), pairs=[(paths[2], vb)], figures=False)
    # extrapolation figure drawn from the fit's own numbers
    rep3 = build_report(read_documents([*paths, va]), figures=True)
    names = [f.name for f in rep3.figures]
    assert "extrapolation_SOL" in names


def test_run_length_verdicts_are_shown(tmp_path):
    # the layout of transport.convergence.Verdict.to_record (top-level "verdicts" list)
    v = _v_doc(tmp_path / "v.json", 0.855, 3.0)
    doc = json.loads(v.read_text())
    doc["verdicts"] = [{
        "quantity": "shear_viscosity", "method": "green_kubo", "group": None,
        "long_enough": False, "relative_stderr": 0.081, "target_relative_stderr": 0.05,
        "additional_time": 300.0, "time_unit": "ps", "additional_replicas": 3,
        "wall_clock_hours": 12.5, "reasons": ["the error is 8.1%, above the 5% target"],
        "checks": [{"name": "plateau", "passed": True}]}]
    v.write_text(json.dumps(doc))
    rep = build_report(read_documents([v]), figures=False)
    from transport.report.render import render_html, render_markdown

    parser = _Tables()
    parser.feed(render_html(rep))
    rows = parser.tables["verdicts"]
    assert rows[1] == ["v", "shear viscosity", "-", "green kubo", "8.1%", "5.0%", "too short",
                       "+300 ps per run (~12 h) or +3 replica(s)",
                       "the error is 8.1%, above the 5% target"]
    assert "| too short |" in render_markdown(rep)


def test_demo_report_step_pairs_diffusion_with_model_a(tmp_path):
    from transport.demo import _report_step

    _v_doc(tmp_path / "model_a_viscosity.json", 6.2, 4.5)
    _v_doc(tmp_path / "model_b_viscosity.json", 4.9, 4.5)
    _d_doc(tmp_path / "diffusion.json", 0.35, 4.5)
    lines: list[str] = []
    html = _report_step(tmp_path, lines.append)
    assert html == tmp_path / "report" / "report.html" and html.exists()
    assert str(html) in lines[-1]
    merged = json.loads((tmp_path / "report" / "report.json").read_text())
    (c,) = merged["corrections"]
    assert c["viscosity"] == 6.2 and "model_a_viscosity.json" in c["pairing"]
