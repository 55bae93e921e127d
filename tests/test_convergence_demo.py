"""The demo's run-length step runs end to end on a smaller copy of the invented scenario.

The scenario's truth (OU stress with a known viscosity) is what the demo shows; here the step
is checked for what it must print: a verdict for each candidate, the pilot's projection
and the error the full runs then gave.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from transport import demo


def test_run_length_step_prints_both_verdicts(tmp_path, monkeypatch):
    # 4 replicas of 200 ps instead of 0.5 ns: model A's pilot (a tenth, 20 ps per replica)
    # cannot hold the slow stress relaxation of the scenario (its running integral is cut
    # on the fast oscillation and keeps rising): not long enough, whatever its precision
    small = replace(demo.SCENARIO, steps_per_replica=200_000)
    monkeypatch.setattr(demo, "SCENARIO", small)
    files = demo._generate(tmp_path, small, np.random.default_rng(5))
    lines: list[str] = []
    verdicts = demo._run_length_step(files, lines.append, out=tmp_path)
    text = "\n".join(lines)
    assert len(verdicts) == 2
    assert not verdicts[0].long_enough
    assert "pilot runs (10% of production)" in text and "production runs" in text
    assert text.count("run-length verdict") == 2
    assert (tmp_path / "run_length.json").exists()  # the report step shows them
