"""The firmware interface is described once (generator/interface.py): what derives from it follows a
change to it. A test-only input added to the description reaches the plan columns, the bench wire, the
link C's offsets, the C struct and the command-line options, without touching any other file."""

from __future__ import annotations

import dataclasses
import re
from pathlib import Path

import click
from click.testing import CliRunner
from kinetab.generator import cli, cview, dynamics, interface, units
from kinetab.hil import linkview, messages, planfile

ROOT = Path(__file__).resolve().parents[1]

EXTRA = interface.Member(
    name="yaw_rate",
    count=1,
    what="test-only input",
    unit="rad/s",
    lsb_key="firmware.angle_lsb",
    limit="pitch",
    edge_key="envelope.pitch_max",
    si=("yaw_rate_radps",),
    steps="angle steps",
    quantity=units.ANGLE,
    typed_unit="deg",
    labels=("Yaw rate (test only)",),
)
EXTENDED = dataclasses.replace(interface.FF_IN, members=(*interface.FF_IN.members, EXTRA))


def test_operating_point_holds_the_inputs_in_struct_order():
    """The physics' operating point has one field per input column, named as the description says."""
    fields = [f.name for f in dataclasses.fields(dynamics.OperatingPoint)]
    assert fields == list(interface.FF_IN.si_names().values())
    assert list(planfile.SI_NAME) == list(interface.FF_IN.columns)


def test_an_added_input_reaches_plan_wire_c_and_options():
    n = len(interface.FF_IN.columns)
    assert planfile.plan_columns(EXTENDED) == (*planfile.PLAN_COLUMNS, "yaw_rate")

    table = messages.layouts(inputs=EXTENDED)
    assert table[messages.MessageType.SETPOINT].size == messages.LAYOUT[messages.MessageType.SETPOINT].size + 4
    view = linkview.wire(table, inputs=EXTENDED)
    lvalue, offset = view["wire"]["setpoint_inputs"][-1]
    assert (lvalue, offset) == ("yaw_rate", 1 + 2 + 1 + 4 * n)  # type byte, u16 seq, u8 flags, n x i32
    lengths = {name: length for name, _, length in view["kinds"]}
    assert lengths["SETPOINT"] == 1 + 2 + 1 + 4 * (n + 1)

    members = cview._struct_view(EXTENDED, "veh")["members"]
    assert members[-1] == ("int32_t yaw_rate;".ljust(19), "test-only input, angle steps")

    @click.command()
    @cli.point_options(EXTENDED)
    def probe(**point: float) -> None:
        click.echo(repr(sorted(point.items())))

    out = CliRunner().invoke(probe, ["--yaw-rate", "90 deg", "--payload", "3"]).output
    assert "('yaw_rate', 1.5707963" in out and "('payload', 3.0)" in out


def test_no_other_source_file_spells_the_whole_input_list():
    """Grep: apart from the description, no file of the generator, the bench or the templates names every
    input column or SI name as a string (a column list, a dict of columns: a copy of the interface that
    could drift). Building an OperatingPoint by keyword is not a copy: it is keyword-only, so a missing or
    unknown input fails at once."""
    names = [*interface.FF_IN.columns, *interface.FF_IN.si_names().values()]
    allowed = {"generator/interface.py"}
    spelled = []
    for path in sorted([*ROOT.glob("generator/*.py"), *ROOT.glob("hil/*.py"), *ROOT.glob("templates/*/*.j2")]):
        text = path.read_text(encoding="utf-8")
        for names_ in (interface.FF_IN.columns, tuple(interface.FF_IN.si_names().values())):
            quoted = [c for c in names_ if re.search(rf"[\"']{c}[\"']", text)]
            if len(quoted) == len(names_):
                spelled.append(str(path.relative_to(ROOT)))
    assert names and set(spelled) <= allowed, f"these files restate the input list: {sorted(set(spelled) - allowed)}"
