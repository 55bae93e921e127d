"""`transport demo` (and `make demo`) on a smaller, seeded scenario: it runs, writes what it
says, and its known truths lie where its intervals say.

The scenario is the demo's own (transport.demo.SCENARIO) with each replica cut from 1 ns to
0.4 ns (20,000 thermo rows) to keep the suite fast; the diffusion step is unchanged. The
truths are the demo's constructions (exact OU integrals, Brownian D with the drift
correction), read back from its JSON files.
"""

from __future__ import annotations

import dataclasses
import json
import re

import pytest
from click.testing import CliRunner
from scipy import stats

import transport.demo as demo_module
from transport.cli import main


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    small = dataclasses.replace(demo_module.SCENARIO, steps_per_replica=400_000)
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(demo_module, "SCENARIO", small)
        res = CliRunner().invoke(main, ["-q", "demo", "--out", str(out), "--seed", "3"],
                                 catch_exceptions=False)
    assert res.exit_code == 0, res.output
    return out, res.stdout, small


def _records(out):
    for name in ("model_a_viscosity.json", "model_b_viscosity.json", "diffusion.json"):
        doc = json.loads((out / name).read_text())
        truth = doc["truth"]
        for r in doc["results"]:
            t = (truth["shear_viscosity"] if "shear_viscosity" in truth
                 else truth["self_diffusion"][r["group"]])
            yield name, r, t


def test_demo_writes_its_files(demo_run):
    out, _, small = demo_run
    names = {p.name for p in out.iterdir()}
    for m in small.models:
        assert {f"{m.name}_replica{k}.log.gz" for k in range(1, small.replicas + 1)} <= names
        assert {f"{m.name}_viscosity.json", f"{m.name}_viscosity.png"} <= names
    assert {"diffusion.json", "diffusion.png", "diffusion_trajectory.xtc"} <= names
    for p in out.glob("*.png"):
        assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_demo_truths_inside_its_intervals(demo_run):
    out, text, small = demo_run
    recs = list(_records(out))
    # 2 models x (Green–Kubo, Einstein) + 2 diffusing species
    assert [r["method"] for _, r, _ in recs].count("green_kubo") == 2
    assert len(recs) == 6
    # the truths in the JSON are the scenario's (viscosity as constructed)
    assert {t for n, _, t in recs if "viscosity" in n} == {m.viscosity_mpas
                                                          for m in small.models}
    for name, r, truth in recs:
        lo, hi = r["interval95"]
        # seed 3 (chosen, said here): all six 95% intervals contain their truth. Any one
        # seed has P = 1 - 0.95^6 = 0.26 of at least one miss, so a miss after a change is
        # a reason to look, checked against the robust bound below first.
        assert lo <= truth <= hi, (name, r["method"], r["value"], (lo, hi), truth)
        # seed-independent: within the 99.9% normal bound (scipy.stats.norm) of the truth
        assert abs(r["value"] - truth) <= stats.norm.ppf(0.9995) * r["stderr"], (name, r)
    # the printed verdicts say the same as the JSON
    verdicts = re.findall(r"-> (inside|OUTSIDE) the 95% interval", text)
    assert verdicts == ["inside"] * 6, verdicts


def test_demo_compares_the_candidates_at_two_temperatures(demo_run):
    out, stdout, _ = demo_run
    doc = json.loads((out / "comparison.json").read_text())
    ranks = {c["state"]: [r["name"] for r in c["ranking"]] for c in doc["comparisons"]}
    # invented truth (SCENARIO): model B is 0.2 and 0.1 mPa s from the fictional
    # experiment at 373 and 413 K, model A 1.1 and 0.7 mPa s (the margins are several
    # combined standard errors at 373 K; at 413 K, 2 x 250 ps, about 2)
    assert ranks["T373"] == ["model_b", "model_a"], ranks
    assert set(ranks) == {"T373", "T413"}
    assert (out / "comparison" / "report.html").is_file()
    assert (out / "comparison" / "figures" / "forest.png").is_file()
    assert "ranking by agreement with the reference" in stdout
