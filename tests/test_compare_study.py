"""`transport compare` end to end on a synthetic study with known truth; the same tasks on a
real Dask cluster; the results store; one-line refusals of bad manifests."""

from __future__ import annotations

import json
import math
import shutil
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from transport._study_data import write_synthetic_study
from transport.cli import main
from transport.study import load_study
from transport.study_analysis import analyse_study, compare_study

# Known truth (mPa s): exact Green–Kubo integrals of the synthetic OU stress
# (transport.synthetic). The reference is model_a's truth; model_b is 20% high, model_c 40%
# low, so the true order of |value - reference| is a, b, c.
TRUTH = {"model_a": {"T350": 5.0}, "model_b": {"T350": 6.0}, "model_c": {"T350": 3.0}}


@pytest.fixture(scope="module")
def study_dir(tmp_path_factory):
    d = tmp_path_factory.mktemp("study")
    # 3 replicas of 400 ps each (100,000 rows of 4 fs): about 3.5% per replica, ~2% pooled
    # (measured on this stress model), so the smallest margin of the true order (1.0 mPa s
    # between |b - ref| and |c - ref|, and between |a - ref| and |b - ref|) is > 5 combined
    # standard errors: the ranking and the significance calls must come out right.
    write_synthetic_study(d, truth=TRUTH, references={"T350": (5.0, 0.1)},
                          temperatures={"T350": 350.0}, replicas=3, rows=100_000,
                          rng=np.random.default_rng(11), file_format="npz", target=0.05)
    return d


@pytest.fixture
def study_copy(study_dir, tmp_path):
    d = tmp_path / "s"
    shutil.copytree(study_dir, d)
    return d


def _without_last_run(text: str) -> str:
    head, _, _ = text.rpartition("[[candidates.runs]]")
    return head


def test_compare_ranks_right_then_store_skips_unchanged_runs(study_copy):
    manifest = study_copy / "study.toml"
    full = manifest.read_text()
    manifest.write_text(_without_last_run(full))  # model_c with 2 replicas first
    runner = CliRunner()
    out = study_copy / "out.json"
    r = runner.invoke(main, ["-q", "compare", str(manifest), "--workers", "2",
                             "--json", str(out)])
    assert r.exit_code == 0, r.output
    assert "runs analysed now: 8, read from the store: 0" in r.output
    doc = json.loads(out.read_text())
    (comp,) = doc["comparisons"]
    assert [x["name"] for x in comp["ranking"]] == ["model_a", "model_b", "model_c"]
    # every pair differs by >= 5 combined standard errors (see the fixture): all
    # significant after Holm
    assert all(x["significant"] for x in comp["differences"])
    assert comp["ranking"][0]["probability_closest"] > 0.99
    cands = {c["name"]: c for c in doc["candidates"]}
    for name, truth in TRUTH.items():
        lo, hi = cands[name]["result"]["interval95"]
        # 95% intervals; a miss of one of three has probability ~14%, so the test asks
        # for the truth within 2 interval half-widths (a miss ~1e-4 per candidate)
        half = (hi - lo) / 2
        assert abs((lo + hi) / 2 - truth["T350"]) < 2 * half, (name, lo, hi)
    assert cands["model_c"]["replicas"] == 2
    # second compare: nothing re-analysed
    r = runner.invoke(main, ["-q", "compare", str(manifest), "--workers", "2"])
    assert r.exit_code == 0, r.output
    assert "runs analysed now: 0, read from the store: 8" in r.output
    # a new replica: only it is analysed
    manifest.write_text(full)
    r = runner.invoke(main, ["-q", "compare", str(manifest), "--workers", "2"])
    assert r.exit_code == 0, r.output
    assert "runs analysed now: 1, read from the store: 8" in r.output
    assert (study_copy / "study.results.sqlite").is_file()


def test_dask_local_cluster_gives_identical_records(study_dir):
    distributed = pytest.importorskip("dask.distributed")
    study = load_study(study_dir / "study.toml")
    local = analyse_study(study, workers=2)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address=None) as cluster:
        remote = analyse_study(study, scheduler=cluster.scheduler_address)
    assert not local.failures and not remote.failures
    # the same pure task on the same bytes: bit-identical JSON records
    assert json.dumps(remote.records, sort_keys=True) == json.dumps(local.records,
                                                                   sort_keys=True)


def test_a_failing_run_is_named_and_the_others_kept(study_copy):
    bad = study_copy / "runs" / "model_b_T350_rep1.npz"
    bad.write_bytes(b"not an npz archive")
    r = CliRunner().invoke(main, ["-q", "compare", str(study_copy / "study.toml"),
                                  "--workers", "1", "--no-store"])
    assert r.exit_code == 0, r.output
    assert "failed: model_b/T350/run 0 (model_b_T350_rep1.npz):" in r.output
    assert "runs analysed now: 9" in r.output


@pytest.mark.parametrize("edit,key", [
    (lambda t: t.replace("temperature = 350.0", 'temperature = "hot"'),
     "states[0].temperature"),
    (lambda t: t.replace("model_c_T350_rep2.npz", "missing.npz"),
     "candidates[2].runs[1].stress"),
    (lambda t: t.replace('units = "real"', 'unit = "real"', 1), "candidates[0].unit"),
    (lambda t: t.replace('name = "model_b"', "", 1), "candidates[1].name"),
])
def test_bad_manifest_exit_2_one_line_nothing_written(study_copy, edit, key):
    manifest = study_copy / "study.toml"
    manifest.write_text(edit(manifest.read_text()))
    out = study_copy / "o.json"
    r = CliRunner().invoke(main, ["compare", str(manifest), "--json", str(out)])
    assert r.exit_code == 2
    lines = r.output.strip().splitlines()
    assert len(lines) == 1 and f"study.toml: {key}:" in lines[0], r.output
    assert not out.exists() and not (study_copy / "study.results.sqlite").exists()


# ---- a study whose runs have trajectories: D corrected with the run's own viscosity -------

DATA = Path(__file__).parent / "data"
LJ_TOP = DATA / "lj_diffusion" / "lj.data"
LJ_DCD = DATA / "lj_diffusion" / "lj_diff.dcd"
LJ_LOGS = sorted((DATA / "lj_viscosity").glob("lj_visc_rep*.log.gz"))
XI = 2.837297  # Yeh & Hummer, J. Phys. Chem. B 108, 15873 (2004), cubic box
LJ_BOX = 11.757173  # tests/data/lj_diffusion/README.md (cubic, N = 1372, rho* = 0.8442)
LJ_T = 0.722


def _lj_manifest(folder: Path) -> Path:
    # the LJ liquid of tests/data (same model and state point in both folders; the
    # viscosity logs are an 864-atom box, and viscosity hardly depends on box size).
    # Candidate "two_logs": a run with stress + trajectory and a run with stress only;
    # candidate "one_log": one run with both. References: Meier, Laesecke & Kabelac,
    # J. Chem. Phys. 121, 3671 and 9526 (2004) as quoted in tests/data/README.md (eta* =
    # 3.258; D* = 0.0325 in the periodic box of N = 1372, plus the Yeh-Hummer correction
    # with eta* = 3.258, i.e. 0.0325 + 0.00284 for the infinite system).
    runs = {"two_logs": [(LJ_LOGS[0], True), (LJ_LOGS[1], False)],
            "one_log": [(LJ_LOGS[2], True)]}
    lines = ['[study]', 'name = "LJ liquid"', "",
             "[[states]]", 'label = "LJ"', f"temperature = {LJ_T}",
             "[states.reference.viscosity]", "value = 3.258", "stderr = 0.05",
             'unit = "reduced (lj)"', 'source = "Meier et al. 2004"',
             "[states.reference.diffusion]", "value = 0.03534", "stderr = 0.001",
             'unit = "reduced (lj)"', 'species = "all"', 'source = "Meier et al. 2004"']
    for name, rs in runs.items():
        lines += ["", "[[candidates]]", f'name = "{name}"', 'units = "lj"',
                  "timestep = 0.005"]
        for log, traj in rs:
            lines += ["[[candidates.runs]]", 'state = "LJ"', f'stress = "{log}"']
            if traj:
                lines += [f'topology = "{LJ_TOP}"', f'trajectory = "{LJ_DCD}"']
    path = folder / "study.toml"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def test_trajectory_runs_give_d_corrected_with_the_candidates_viscosity(tmp_path):
    study = load_study(_lj_manifest(tmp_path))
    runs = analyse_study(study, workers=2)  # the pool path, with trajectory tasks
    assert runs.failures == ()
    comp = compare_study(study, runs.records, rng=np.random.default_rng(5), n_draws=2000)
    by = {(q.quantity, c.candidate): c.estimate for q in comp.comparisons
          for c in q.candidates}
    per_run = {r["run"]: {x["quantity"]: x for x in r["results"]
                          if x["method"] in ("green_kubo", "msd_wls")}
               for r in runs.records}
    for cand, n_logs in (("two_logs", 2), ("one_log", 1)):
        gk = [v["shear_viscosity"] for k, v in per_run.items() if k.startswith(cand)]
        assert len(gk) == n_logs
        # the candidate's viscosity: the inverse-variance weighted mean of its runs'
        # Green-Kubo values (computed here), or the single run's value
        w = np.array([1 / x["stderr"] ** 2 for x in gk])
        eta_ref = float(np.sum(w * [x["value"] for x in gk]) / np.sum(w))
        eta = by[("shear_viscosity", cand)]
        assert eta.value == pytest.approx(eta_ref, rel=1e-12)
        # LJ Green-Kubo from 1000 tau: within 3 stated errors of the published eta* = 3.258
        assert abs(eta.value - 3.258) < 3 * eta.stderr, (cand, eta.value, eta.stderr)
        (d_run,) = [v["self_diffusion"] for k, v in per_run.items()
                    if k.startswith(cand) and "self_diffusion" in v]
        d = by[("self_diffusion", cand)]
        assert d.corrected == "yeh_hummer" and d.group == "all"
        # Yeh-Hummer, evaluated here: D = D_pbc + xi k_B T / (6 pi eta L); the box from the
        # data's README (the DCD stores it in single precision: rel 1e-6)
        corr = XI * LJ_T / (6 * math.pi * eta_ref * LJ_BOX)
        assert d.diagnostics["box_lengths"][0] == pytest.approx(LJ_BOX, rel=1e-6)
        assert d.value == pytest.approx(d_run["value"] + corr, rel=1e-6)
        # first-order error: D_pbc's and the correction's (relative error of eta) combined
        assert d.stderr == pytest.approx(
            math.hypot(d_run["stderr"], corr * eta.stderr / eta.value), rel=1e-6)
        # the correction is ~9% of D here (0.0029 on 0.0328), far above rounding
        assert 0.0027 < corr < 0.0031
        # the periodic-box D of 100 tau: within 3 stated errors of the published 0.0325
        assert abs(d_run["value"] - 0.0325) < 3 * d_run["stderr"], d_run
