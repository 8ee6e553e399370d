"""The model writer: chosen values change, everything else (comments, order, layout, units) stays.

Checked independently: the written text is read back with the standard library's tomllib and pint,
not with tomlkit, and every line that was not edited is compared byte for byte."""

from __future__ import annotations

import tomllib

import pytest
from kinetab.generator import model, model_edit, units
from kinetab.generator.errors import ModelError

from tests.helpers import DEMO_PATH

CHANGES = {
    "body.mass": 41.3,
    "friction.coulomb": 3.6,
    "friction.stribeck_speed": 0.025,
    "drive.rotor_inertia": 2.5e-5,
    "drive.gear_ratio": 18.5,
    "friction.deadband_shape": "gap",
}


def test_values_change_and_everything_else_stays():
    text = DEMO_PATH.read_text(encoding="utf-8")
    new, vehicle = model_edit.edited_text(text, CHANGES, "demo")
    old_lines, new_lines = text.splitlines(), new.splitlines()
    assert len(new_lines) == len(old_lines)
    edited = {k.split(".")[1] for k in CHANGES}
    for a, b in zip(old_lines, new_lines):
        key = a.split("=")[0].strip()
        if key not in edited:
            assert a == b  # comments, blank lines, untouched keys: byte for byte
        elif "#" in a:
            assert b.index("#") == a.index("#") and a[a.index("#") :] == b[b.index("#") :]  # comment kept in place
    doc = tomllib.loads(new)  # read back with the standard library
    assert doc["body"]["mass"] == "41.3 kg"
    assert doc["friction"]["stribeck_speed"] == "25 mm/s"  # the user's unit, not SI
    assert doc["drive"]["rotor_inertia"] == "250 g*cm^2"
    assert doc["drive"]["gear_ratio"] == 18.5 and doc["friction"]["deadband_shape"] == "gap"
    assert units.parse(doc["friction"]["coulomb"], units.FORCE) == pytest.approx(3.6, rel=1e-12)
    assert vehicle.body.mass_kg == pytest.approx(41.3) and vehicle.drive.rotor_inertia_kgm2 == pytest.approx(2.5e-5)


def test_a_defaulted_key_is_added_in_si():
    text = DEMO_PATH.read_text(encoding="utf-8").replace('breakaway = "6.5 N"', "")
    new, vehicle = model_edit.edited_text(text, {"friction.breakaway": 7.25}, "demo")
    assert tomllib.loads(new)["friction"]["breakaway"] == "7.25 N"
    assert vehicle.friction.breakaway_n == 7.25


def test_an_invalid_result_is_refused_naming_the_key():
    text = DEMO_PATH.read_text(encoding="utf-8")
    with pytest.raises(ModelError, match="friction.breakaway"):
        model_edit.edited_text(text, {"friction.coulomb": 50.0}, "demo")  # above the breakaway force
    with pytest.raises(ModelError, match="body.weight"):
        model_edit.edited_text(text, {"body.weight": 3.0}, "demo")


def test_loaded_values_round_trip_through_the_writer():
    """Writing every key's own current value gives a model that loads to the same vehicle (7 digits)."""
    text = DEMO_PATH.read_text(encoding="utf-8")
    v = model.load(DEMO_PATH)
    keys = [key for key in model.FIELDS if not model.SCHEMA[key.split(".")[0]][key.split(".")[1]].optional]
    same = {key: model.value(v, key) for key in keys}
    new, again = model_edit.edited_text(text, same, "demo")
    for key in keys:
        a, b = model.value(v, key), model.value(again, key)
        assert a == b if isinstance(a, str) else b == pytest.approx(a, rel=1e-6), key
