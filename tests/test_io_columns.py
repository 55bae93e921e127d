"""Column names -> canonical names, including property-based checks of the mapping."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import examples
from hypothesis import given, settings
from hypothesis import strategies as st

from transport.io import TENSOR_ORDER, canonical_name, load_stress, map_columns


@pytest.mark.parametrize(
    ("name", "canon"),
    [
        # thermo keywords as the engine prints them in headers (common practice)
        ("Step", "step"), ("Time", "time"), ("Temp", "temperature"), ("Volume", "volume"),
        ("Vol", "volume"), ("Press", "press"), ("Pxx", "pxx"), ("Pyz", "pyz"), ("Lx", "lx"),
        ("Density", "density"), ("c_thermo_temp", "temperature"),
        # time-averaging output names the step column "TimeStep"
        ("TimeStep", "step"),
        # energy-file terms (names as pyedr reports them)
        ("Pres-XY", "pxy"), ("Pres-ZY", "pzy"), ("Box-X", "lx"), ("Temperature", "temperature"),
        # spelling variants
        ("P_xy", "pxy"), ("pressure_xz", "pxz"), ("v_pxy", "pxy"), ("p[yz]", "pyz"),
    ],
)
def test_known_names(name, canon):
    assert canonical_name(name) == canon


@pytest.mark.parametrize("name", ["E_pair", "TotEng", "c_myP[4]", "f_ave[2]", "KinEng", "x"])
def test_names_without_meaning(name):
    # c_ID[k] and f_ID[k] need the echoed definitions (the log reader resolves them)
    assert canonical_name(name) is None


def test_definitions_override_names_and_keywords_win():
    names = ["Step", "c_P[4]", "v_sxy", "Pxy"]
    canon, notes = map_columns(names, {"c_P[4]": "pxy", "v_sxy": "pxy"})
    assert canon["pxy"] == "Pxy"  # a plain keyword is preferred to a resolved alias
    assert len(notes) == 2
    canon, _ = map_columns(["Step", "c_P[4]"], {"c_P[4]": "pxy"})
    assert canon == {"step": "Step", "pxy": "c_P[4]"}


_PREFIXES = ["p", "pres", "pressure", "v_p", "pres-"]
_EXTRA = ["Step", "Temp", "E_pair", "TotEng", "KinEng", "c_foo", "f_ave[3]", "Volume", "CPU",
          "Density", "v_other", "PotEng", "Atoms"]


@st.composite
def _variant(draw, comp: str) -> str:
    """A random spelling of component `comp` (pxx ... pyz): prefix, case and underscores."""
    prefix = draw(st.sampled_from(_PREFIXES))
    letters = list(prefix + comp[1:])
    out = []
    for i, ch in enumerate(letters):
        if i > 0 and draw(st.booleans()) and out[-1] not in "_-":
            out.append("_")
        out.append(ch.upper() if draw(st.booleans()) else ch)
    return "".join(out)


@st.composite
def _header(draw, extras=tuple(_EXTRA)):
    names = {c: draw(_variant(c)) for c in TENSOR_ORDER}
    extra = draw(st.lists(st.sampled_from(extras), max_size=6, unique=True))
    order = draw(st.permutations(list(names.values()) + extra))
    return names, order


@settings(max_examples=examples(200), deadline=None)
@given(_header())
def test_mapping_finds_every_component_in_any_spelling_and_order(case):
    names, order = case
    canon, _ = map_columns(order)
    for comp, name in names.items():
        assert canon[comp] == name
    # extra columns never take a pressure component
    assert {canon[c] for c in TENSOR_ORDER} == set(names.values())


_MEANINGLESS = tuple(x for x in _EXTRA if canonical_name(x) is None)


@settings(max_examples=examples(25), deadline=None)
@given(case=_header(_MEANINGLESS), seed=st.integers(0, 2**32 - 1))
def test_mapped_columns_carry_the_right_values_end_to_end(tmp_path_factory, case, seed):
    """Write a CSV with shuffled, oddly spelled columns; the reader must put each column's
    values in the right component."""
    names, order = case
    rng = np.random.default_rng(seed)
    n = 8
    values = {name: rng.normal(size=n).round(6) for name in order}
    values["__step"] = np.arange(n) * 5.0
    path = tmp_path_factory.mktemp("cols") / "t.csv"
    cols = ["TimeStep", *order]
    with open(path, "w") as fh:
        fh.write(",".join(cols) + "\n")
        for i in range(n):
            row = [f"{values['__step'][i]:g}"] + [repr(float(values[c][i])) for c in order]
            fh.write(",".join(row) + "\n")
    s = load_stress(path, units="metal", timestep=0.002, volume=1000.0)
    for k, comp in enumerate(TENSOR_ORDER):
        # metal pressure is bar: 1e5 Pa exactly (SI Brochure)
        np.testing.assert_allclose(s.pressure[k], values[names[comp]] * 1e5, rtol=1e-15)
