"""A small study of three invented candidate potentials, written and compared end to end.

Invented scenario with known truth: a liquid at two temperatures, three candidates whose
synthetic stress has an exactly known Green–Kubo viscosity (model_a equals the invented
reference, model_b is 20% high, model_c 20% low), two replicas each, written as thermo
logs with a study manifest beside them.

Run: ``python examples/compare_study.py [FOLDER]`` (default: a temporary folder); then
``transport compare FOLDER/study.toml`` gives the same comparison from the command line.
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

import numpy as np

from transport._study_data import write_synthetic_study
from transport.report.comparison import format_comparison
from transport.study import load_study
from transport.study_analysis import analyse_study, compare_study

TRUTH = {"model_a": {"T350": 5.0, "T400": 3.0},
         "model_b": {"T350": 6.0, "T400": 3.6},
         "model_c": {"T350": 4.0, "T400": 2.4}}


def main(folder: str | None = None, seed: int = 1, file_format: str = "log") -> Path:
    out = Path(folder or tempfile.mkdtemp(prefix="transport-study-"))
    manifest = write_synthetic_study(
        out, truth=TRUTH, references={"T350": (5.0, 0.1), "T400": (3.0, 0.06)},
        temperatures={"T350": 350.0, "T400": 400.0}, replicas=2, rows=50_000,
        rng=np.random.default_rng(seed), name="three invented candidates",
        file_format=file_format)
    study = load_study(manifest)
    print(f"{manifest}: {len(study.candidates)} candidates, {len(study.states)} state "
          f"points, {len(study.runs)} runs")
    # the same as `transport compare study.toml --workers 1 --no-store`
    runs = analyse_study(study, workers=1)
    result = compare_study(study, runs.records, rng=np.random.default_rng(seed),
                           failures=runs.failures)
    print(format_comparison(result))
    return manifest


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else None)
