"""build and verify end to end: exit codes for fresh, stale, tampered, missing, over-budget, bad input."""

from __future__ import annotations

import json
import re
import xml.etree.ElementTree as ET

import pytest
from kinetab.generator import cli, synthesis

from tests.helpers import DEMO_PATH, demo_doc, invented, vehicle_from, write_model


def run(args, capsys):
    try:
        cli.main(args)
        code = 0
    except SystemExit as exc:
        code = exc.code
    out = capsys.readouterr()
    return code, out.out, out.err


@pytest.fixture
def built(tmp_path, capsys):
    out = tmp_path / "gen"
    code, text, err = run(["build", str(DEMO_PATH), "-o", str(out), "--vectors", str(tmp_path / "vec.csv")], capsys)
    assert code == 0, err
    return out


def test_build_writes_header_source_and_vectors(built, tmp_path):
    assert sorted(p.name for p in built.iterdir()) == ["larkspur_ff.c", "larkspur_ff.h"]
    rows = (tmp_path / "vec.csv").read_text().splitlines()
    assert rows[1].startswith("speed_right,speed_left") and len(rows) >= 10_002
    assert not list(built.glob(".*tmp"))  # no temporary files left behind


def test_verify_fresh_with_reports(built, tmp_path, capsys):
    rep, jun = tmp_path / "r.json", tmp_path / "j.xml"
    code, out, _ = run(["verify", str(DEMO_PATH), str(built), "--report", str(rep), "--junit", str(jun)], capsys)
    assert code == 0 and "fresh" in out
    doc = json.loads(rep.read_text())
    for key in ("ok", "budget_a", "max_error_a", "rms_error_a", "total_bytes", "tables", "checks"):
        assert key in doc
    assert doc["ok"] is True and doc["max_error_a"] <= doc["bound_a"] <= doc["budget_a"] == 0.02
    assert {"name", "segments", "q_format", "bytes", "max_error"} <= set(doc["tables"][0])
    assert sum(t["bytes"] for t in doc["tables"]) == doc["total_bytes"]
    assert '"table_bytes_max": 2048,' in rep.read_text()  # a whole number of bytes, as the model says it
    budget = next(c["detail"] for c in doc["checks"] if c["name"] == "error budget")
    assert "m/s^2 (default: from firmware.current_budget)" in budget  # the demo sets no firmware.accel_budget
    suite = ET.parse(jun).getroot()
    assert suite.tag == "testsuite" and suite.get("failures") == "0" and int(suite.get("tests")) == 5
    assert [c.get("name") for c in suite] == [c["name"] for c in doc["checks"]]


def test_verify_tampered_table(built, tmp_path, capsys):
    src = built / "larkspur_ff.c"
    text = src.read_text()
    start = text.index("larkspur_tab_friction_1[")
    line_start = text.index("\n", text.index("{", start)) + 1
    first = text[line_start : text.index(",", line_start)].strip()
    src.write_text(text[:line_start] + text[line_start:].replace(first, str(int(first) + 1), 1))
    jun = tmp_path / "j.xml"
    code, _, err = run(["verify", str(DEMO_PATH), str(built), "--junit", str(jun)], capsys)
    assert code == 1 and "larkspur_ff.c:" in err and "stale or edited" in err
    assert ET.parse(jun).getroot().get("failures") == "1"


def test_verify_missing_file(built, capsys):
    (built / "larkspur_ff.h").unlink()
    code, _, err = run(["verify", str(DEMO_PATH), str(built)], capsys)
    assert code == 1 and "larkspur_ff.h: missing" in err


def test_verify_stale_after_model_change(built, tmp_path, capsys):
    doc = demo_doc()
    doc["friction"]["coulomb"] = "4.6 N"
    path = write_model(tmp_path, doc)
    code, _, err = run(["verify", str(path), str(built)], capsys)
    assert code == 1 and "stale" in err


def test_impossible_budget_exits_one_naming_the_budget(tmp_path, capsys):
    doc = demo_doc()
    doc["firmware"]["current_budget"] = "0.4 mA"  # below half an output step: nothing can meet it
    path = write_model(tmp_path, doc)
    out = tmp_path / "gen"
    code, _, err = run(["build", str(path), "-o", str(out)], capsys)
    assert code == 1 and "firmware.current_budget" in err and "0.0004 A" in err and "achievable" in err
    # regression: the message named no way out; now the levers, each with the bound it gives. The
    # smallest budget can never be below half an output step (the final rounding alone: 0.5 mA here)
    found = re.search(r"levers: a budget of at least ([0-9.e-]+) A", err)
    assert found and 0.0005 < float(found.group(1)) < 0.01 and "firmware.current_lsb = 0.00025 A (best bound" in err
    assert 'firmware.word = "int32" (best bound' in err
    assert not out.exists()
    rep = tmp_path / "r.json"
    code, _, err = run(["verify", str(path), str(out), "--report", str(rep)], capsys)
    assert code == 1 and json.loads(rep.read_text())["ok"] is False


def test_bad_model_writes_nothing(tmp_path, capsys):
    doc = demo_doc()
    doc["body"]["mass"] = "-1 kg"
    path = write_model(tmp_path, doc)
    out = tmp_path / "gen"
    code, _, err = run(["build", str(path), "-o", str(out), "--vectors", str(tmp_path / "v.csv")], capsys)
    assert code == 2 and err.count("\n") == 1 and "body.mass" in err
    assert not out.exists() and not (tmp_path / "v.csv").exists()


def test_predict_current_fixed_within_budget(capsys):
    cli.main(
        [
            "predict",
            str(DEMO_PATH),
            "--payload",
            "24 kg",
            "--speed-right",
            "0.35",
            "--speed-left",
            "0.1",
            "--accel-right",
            "0.2",
            "--accel-left",
            "-0.1",
            "--pitch",
            "0.05 rad",
            "--roll",
            "0.01 rad",
            "--json",
        ]
    )
    doc = json.loads(capsys.readouterr().out)
    for side in ("right", "left"):
        assert abs(doc[side]["current_fixed"] - doc[side]["current"]) <= 0.02


def test_unwritable_outputs_are_one_line_errors(tmp_path, capsys):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    code, _, err = run(["build", str(DEMO_PATH), "-o", str(blocker)], capsys)
    assert code == 2 and err.count("\n") == 1 and "--out" in err and "is a file" in err
    code, _, err = run(["build", str(DEMO_PATH), "-o", str(tmp_path / "g"), "--vectors", str(tmp_path)], capsys)
    assert code == 2 and err.count("\n") == 1 and "--vectors" in err and "Traceback" not in err
    assert not (tmp_path / "g").exists()


def _infeasible(tmp_path):
    doc = demo_doc()
    doc["drive"]["current_limit"] = "3 A"  # the demo needs about 7 A at accel_max on pitch_max
    return write_model(tmp_path, doc, "hot.toml")


def test_infeasible_envelope_fails_verify_and_build_unless_accepted(tmp_path, capsys):
    """Regression: verify passed and build only warned for a peak current above drive.current_limit."""
    path = _infeasible(tmp_path)
    out = tmp_path / "gen"
    code, _, err = run(["build", str(path), "-o", str(out)], capsys)
    assert code == 1 and "envelope infeasible" in err and "--allow-infeasible-envelope" in err
    assert not out.exists()
    code, _, err = run(["build", str(path), "-o", str(out), "--allow-infeasible-envelope"], capsys)
    assert code == 0 and "accepted by --allow-infeasible-envelope" in err and (out / "larkspur_ff.h").exists()
    rep, jun = tmp_path / "r.json", tmp_path / "j.xml"
    code, _, err = run(["verify", str(path), str(out), "--report", str(rep), "--junit", str(jun)], capsys)
    assert code == 1 and "envelope infeasible" in err
    cases = {c.get("name"): c.find("failure") is not None for c in ET.parse(jun).getroot()}
    assert cases["envelope within the drive's limits"] is True and cases["error budget"] is False
    assert json.loads(rep.read_text())["envelope_problems"]
    code, _, _ = run(["verify", str(path), str(out), "--allow-infeasible-envelope"], capsys)
    assert code == 0


def test_verify_checks_golden_vectors(tmp_path, capsys):
    """Regression: a stale vectors.csv passed verify."""
    out = tmp_path / "gen"
    assert run(["build", str(DEMO_PATH), "-o", str(out), "--vectors", str(out / "vectors.csv")], capsys)[0] == 0
    assert run(["verify", str(DEMO_PATH), str(out)], capsys)[0] == 0
    vec = out / "vectors.csv"
    lines = vec.read_text().splitlines()
    lines[5] = lines[5].replace(",", ",1", 1)
    vec.write_text("\n".join(lines) + "\n")
    code, _, err = run(["verify", str(DEMO_PATH), str(out)], capsys)
    assert code == 1 and "vectors.csv:6: stale or edited" in err and "--vectors" in err
    code, _, err = run(["verify", str(DEMO_PATH), str(out), "--vectors", str(tmp_path / "none.csv")], capsys)
    assert code == 1 and "none.csv: missing" in err


def test_verify_output_truthful(built, capsys):
    """Regression: success printed a line starting 'error:', a CRLF file was reported as 'expected /*,
    found /*', the first failure was printed twice, and a stale file did not say what to run."""
    code, out, err = run(["verify", str(DEMO_PATH), str(built)], capsys)
    assert code == 0 and not any(line.startswith("error") for line in (out + err).splitlines())
    assert "all 5 checks passed" in out
    header = built / "larkspur_ff.h"
    header.write_bytes(header.read_bytes().replace(b"\n", b"\r\n"))
    code, out, err = run(["verify", str(DEMO_PATH), str(built)], capsys)
    assert code == 1 and "line endings changed (CRLF)" in err
    failing = [line for line in err.splitlines() if "larkspur_ff.h" in line]
    assert len(failing) == 1 and f"kinetab build {DEMO_PATH} -o {built}" in failing[0]
    assert err.strip().splitlines()[-1].endswith("1 of 5 checks failed")


def test_written_files_honour_the_umask(tmp_path, capsys):
    """Regression: every atomically written file came out 0600 (the temporary file's mode)."""
    import os

    old = os.umask(0o022)
    try:
        assert run(["build", str(DEMO_PATH), "-o", str(tmp_path / "g")], capsys)[0] == 0
    finally:
        os.umask(old)
    assert (tmp_path / "g" / "larkspur_ff.h").stat().st_mode & 0o777 == 0o644


def test_unwritable_vectors_leave_the_old_set_in_place(built, tmp_path, capsys):
    """Regression: an unwritable --vectors path exited 2 after the C files were already written."""
    import os

    if os.geteuid() == 0:
        blocked = tmp_path / "file_not_folder" / "v.csv"  # root can write anywhere: use a file as the folder
        (tmp_path / "file_not_folder").write_text("x")
    else:
        locked = tmp_path / "locked"
        locked.mkdir(mode=0o500)
        blocked = locked / "v.csv"
    before = {p.name: p.read_bytes() for p in built.iterdir()}
    doc = demo_doc()
    doc["friction"]["coulomb"] = "4.6 N"  # a different model: its files would differ
    path = write_model(tmp_path, doc)
    code, _, err = run(["build", str(path), "-o", str(built), "--vectors", str(blocked)], capsys)
    assert code == 2 and err.count("\n") == 1 and "v.csv" in err
    assert {p.name: p.read_bytes() for p in built.iterdir()} == before


def test_vectors_dash_prints_csv_and_empty_out_is_refused(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    code, out, err = run(["build", str(DEMO_PATH), "-o", "gen", "--vectors", "-"], capsys)
    assert code == 0 and out.splitlines()[1].startswith("speed_right,") and not (tmp_path / "-").exists()
    assert "wrote" in err
    code, _, err = run(["build", str(DEMO_PATH), "-o", ""], capsys)
    assert code == 2 and "empty name" in err and sorted(p.name for p in tmp_path.iterdir()) == ["gen"]


def test_report_into_an_unwritable_place_is_one_line(tmp_path, capsys):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    code, _, err = run(["report", str(DEMO_PATH), "-o", str(blocker / "sub")], capsys)
    assert code == 2 and err.count("\n") == 1 and "Traceback" not in err


@pytest.mark.slow  # renders a whole report (8 s)
def test_report_zooms_into_the_deadband_and_speaks_degrees(tmp_path, capsys):
    """Regression: the friction table's structure sat in 2 % of the axis, and angle axes were in radians
    while the command line speaks degrees: split tables get a second, zoomed column; angles are degrees."""
    import math
    import struct

    from kinetab.generator import model, plots, synthesis

    assert run(["report", str(DEMO_PATH), "-o", str(tmp_path / "rep")], capsys)[0] == 0

    def width(name):
        return struct.unpack(">I", (tmp_path / "rep" / name).read_bytes()[16:20])[0]

    assert width("table_friction.png") > 1.4 * width("table_m11.png")
    fw = synthesis.synthesise(model.load(DEMO_PATH))
    assert plots._input_axis(fw, "pitch")[1] == "deg" and plots._input_axis(fw, "roll")[1] == "deg"
    assert plots._input_axis(fw, "pitch")[0] == pytest.approx(math.degrees(fw.vehicle.firmware.angle_lsb_rad))


def _invented(tmp_path, seed: int):
    """A random vehicle that builds (helpers.invented, seeded); its model file and document."""
    from tests.helpers import invented

    doc, _ = invented(seed, "tamarack")
    return write_model(tmp_path, doc, "tamarack.toml"), doc


def test_rebuild_refreshes_the_vectors_in_its_folder(tmp_path, capsys):
    """Regression (README's own sequence): build with --vectors DIR/vectors.csv, change the model, build
    without --vectors, verify: exit 1 "vectors.csv: stale". A rebuild now refreshes the folder's
    vectors.csv and names it; vectors elsewhere are left alone (verify checks them only when named)."""
    path, doc = _invented(tmp_path, 77)
    out = tmp_path / "fw"
    allow = "--allow-infeasible-envelope"
    assert run(["build", str(path), "-o", str(out), "--vectors", str(out / "vectors.csv"), allow], capsys)[0] == 0
    doc["body"]["mass"] = f"{float(doc['body']['mass'].split()[0]) * 1.1} kg"
    write_model(tmp_path, doc, "tamarack.toml")
    code, text, err = run(["build", str(path), "-o", str(out), allow], capsys)
    assert code == 0 and str(out / "vectors.csv") in text, err
    code, text, err = run(["verify", str(path), str(out), "--allow-infeasible-envelope"], capsys)
    assert code == 0 and f"{out / 'vectors.csv'}: fresh" in text, err


def test_verify_checks_the_link_files_of_the_model(tmp_path, capsys):
    """Regression: after a model change and a rebuild, <name>_link.h/.c kept the old fingerprint and
    verify passed. Now each is checked against the model's fingerprint, and the failure names the
    command (with the period the files were made for); build warns about them too."""
    import kinetab

    path, doc = _invented(tmp_path, 78)
    out = tmp_path / "fw"
    assert run(["build", str(path), "-o", str(out), "--allow-infeasible-envelope"], capsys)[0] == 0
    kinetab.main(["bench", "link", str(path), "-o", str(out), "--period", "2 ms"])
    capsys.readouterr()
    code, text, err = run(["verify", str(path), str(out), "--allow-infeasible-envelope"], capsys)
    assert code == 0 and "tamarack_link.h: fresh" in text and "tamarack_link.c: fresh" in text, err
    doc["drive"]["torque_constant"] = f"{float(doc['drive']['torque_constant'].split()[0]) * 0.9} N*m/A"
    write_model(tmp_path, doc, "tamarack.toml")
    code, text, err = run(["build", str(path), "-o", str(out), "--allow-infeasible-envelope"], capsys)
    assert code == 0 and "warning: " in err and "tamarack_link.h: stale" in err
    code, text, err = run(["verify", str(path), str(out), "--allow-infeasible-envelope"], capsys)
    stale = [line for line in err.splitlines() if line.startswith("FAILED")]
    assert code == 1 and len(stale) == 2, err
    assert all("stale: made from fingerprint" in line for line in stale)
    assert all(f"run: kinetab bench link {path} -o {out} --period '2000 us'" in line for line in stale)
    kinetab.main(["bench", "link", str(path), "-o", str(out), "--period", "2000 us"])
    capsys.readouterr()
    assert run(["verify", str(path), str(out), "--allow-infeasible-envelope"], capsys)[0] == 0


def test_verify_names_the_firmware_command_for_a_stale_firmware_project(tmp_path, capsys):
    """A folder `bench firmware` wrote: after a model change verify fails on each of its C files and
    names the command that remakes them, with the board, period and FIFO depth they were made for."""
    import kinetab

    path, doc = _invented(tmp_path, 79)
    out = tmp_path / "fw"
    args = ["bench", "firmware", str(path), "--board", "mps2-an385", "-o", str(out), "--period", "20 ms"]
    kinetab.main([*args, "--fifo-depth", "16"])
    capsys.readouterr()
    code, text, err = run(["verify", str(path), str(out), "--allow-infeasible-envelope"], capsys)
    assert code == 0 and "tamarack_main.c: fresh" in text and "tamarack_uart.h: fresh" in text, err
    doc["body"]["mass"] = f"{float(doc['body']['mass'].split()[0]) * 1.1} kg"
    write_model(tmp_path, doc, "tamarack.toml")
    code, text, err = run(["verify", str(path), str(out), "--allow-infeasible-envelope"], capsys)
    stale = [line for line in err.splitlines() if "stale: made from fingerprint" in line]
    command = f"run: kinetab bench firmware {path} --board mps2-an385 -o {out} --period '20000 us' --fifo-depth 16"
    written = [f for f in out.iterdir() if f.suffix in (".c", ".h") and not f.stem.endswith("_ff")]
    assert code == 1 and len(stale) == len(written) == 9 and all(command in line for line in stale), err


def test_accel_budget_is_met_by_sizing_and_an_impossible_one_names_its_key(tmp_path, capsys):
    """firmware.accel_budget sets the forward helper's budget: a tighter one than the default is met (the
    proven bound below it, more forward table bytes); one below what any table size reaches is exit 1
    naming the key (an invented vehicle)."""
    doc, fw = invented(41, "fwdveh")
    default = fw.fwd_budget_mps2
    doc["firmware"]["accel_budget"] = f"{default / 3} m/s^2"
    tight = synthesis.synthesise(vehicle_from(doc))
    assert tight.fwd_budget_mps2 == pytest.approx(default / 3) and tight.fwd_bound_mps2 <= default / 3
    assert sum(tight.tables[n].bytes for n in ("minv11", "minv12")) >= sum(
        fw.tables[n].bytes for n in ("minv11", "minv12")
    )
    doc["firmware"]["accel_budget"] = "0.0001 mm/s^2"
    code, _, err = run(
        ["build", str(write_model(tmp_path, doc)), "-o", str(tmp_path / "g"), "--allow-infeasible-envelope"], capsys
    )
    assert code == 1 and "firmware.accel_budget" in err and not (tmp_path / "g").exists()
