"""The study manifest: parsed at the door, every mistake one line naming the key path."""

from __future__ import annotations

import pytest

from transport.errors import InputError
from transport.study import load_study

GOOD = """
[study]
target = 0.05

[[states]]
label = "T350"
temperature = 350.0
[states.reference.viscosity]
value = 5.0
stderr = 0.1
source = "invented"

[[candidates]]
name = "a"
units = "real"
[[candidates.runs]]
state = "T350"
stress = "runs/a1.log"

[[candidates]]
name = "b"
[[candidates.runs]]
state = "T350"
stress = "runs/b1.log"
[[candidates.runs]]
state = "T350"
stress = "runs/b2.log"
"""


@pytest.fixture
def folder(tmp_path):
    (tmp_path / "runs").mkdir()
    for n in ("a1", "b1", "b2"):
        (tmp_path / "runs" / f"{n}.log").write_text("x\n")
    return tmp_path


def _load(folder, text):
    p = folder / "study.toml"
    p.write_text(text)
    return load_study(p)


def test_good_manifest_paths_relative_to_it(folder):
    s = _load(folder, GOOD)
    assert [c.name for c in s.candidates] == ["a", "b"]
    assert s.target == 0.05 and s.alpha == 0.05
    assert s.candidates[1].runs[1].stress == folder / "runs" / "b2.log"
    assert s.candidates[0].runs[0].settings["units"] == "real"
    assert s.state("T350").references[0].value == 5.0


@pytest.mark.parametrize("old,new,key,fix", [
    # a path that does not exist, named by its key path
    ('stress = "runs/b2.log"', 'stress = "runs/b3.log"', "candidates[1].runs[1].stress",
     "correct the path"),
    # an unknown key
    ('units = "real"', 'unit = "real"', "candidates[0].unit", "remove it"),
    # a missing key
    ('label = "T350"\n', '', "states[0].label", "add label"),
    # a wrong type
    ("temperature = 350.0", 'temperature = "350 K"', "states[0].temperature",
     "a number without quotes"),
    # a state point without a reference
    ("[states.reference.viscosity]\nvalue = 5.0\nstderr = 0.1\nsource = \"invented\"\n",
     "", "states[0].reference", "add reference"),
    # a run at a state point that is not declared
    ('state = "T350"\nstress = "runs/a1.log"', 'state = "T400"\nstress = "runs/a1.log"',
     "candidates[0].runs[0].state", "use one of: T350"),
])
def test_bad_manifest_is_one_line_naming_key(folder, old, new, key, fix):
    assert old in GOOD
    with pytest.raises(InputError) as exc:
        _load(folder, GOOD.replace(old, new, 1))
    msg = str(exc.value)
    assert "\n" not in msg
    assert msg.startswith(str(folder / "study.toml") + ": " + key + ":"), msg
    assert fix in msg, msg


def test_not_toml_is_one_line(folder):
    with pytest.raises(InputError, match=r"study\.toml: not valid TOML"):
        _load(folder, "[[states]\n")
