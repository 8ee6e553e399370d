"""build and verify end to end: exit codes for fresh, stale, tampered, missing, over-budget, bad input."""

from __future__ import annotations

import json
import xml.etree.ElementTree as ET

import pytest
from kinetab.generator import cli

from tests.helpers import DEMO_PATH, demo_doc, write_model


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
    for key in ("ok", "budget", "max_error", "rms_error", "total_bytes", "tables"):
        assert key in doc
    assert doc["ok"] is True and doc["max_error"] <= doc["bound"] <= doc["budget"] == 0.02
    assert {"name", "segments", "q_format", "bytes", "max_error"} <= set(doc["tables"][0])
    assert sum(t["bytes"] for t in doc["tables"]) == doc["total_bytes"]
    suite = ET.parse(jun).getroot()
    assert suite.tag == "testsuite" and suite.get("failures") == "0" and int(suite.get("tests")) == 3


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


def test_report_renders(tmp_path, capsys):
    code, out, err = run(["report", str(DEMO_PATH), "-o", str(tmp_path / "rep")], capsys)
    assert code == 0, err
    html = (tmp_path / "rep" / "index.html").read_text()
    for png in ("error.png", "envelope.png", "table_friction.png"):
        assert png in html and (tmp_path / "rep" / png).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_unwritable_outputs_are_one_line_errors(tmp_path, capsys):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    code, _, err = run(["build", str(DEMO_PATH), "-o", str(blocker)], capsys)
    assert code == 2 and err.count("\n") == 1 and "--out" in err and "is a file" in err
    code, _, err = run(["build", str(DEMO_PATH), "-o", str(tmp_path / "g"), "--vectors", str(tmp_path)], capsys)
    assert code == 2 and err.count("\n") == 1 and "--vectors" in err and "Traceback" not in err
    assert not (tmp_path / "g").exists()
