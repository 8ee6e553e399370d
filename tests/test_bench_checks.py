"""What the bench commands check before they act: plans against the envelope, logs against the model
that recorded them, the fit's dry run, and unwritable outputs; run through the real entry point on a
vehicle the test draws (random within plausible ranges), with logs made in-process."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from kinetab.generator import dynamics, interface, model, outputs
from kinetab.hil import benchdata, campaign, planfile, planner

import kinetab
from tests.benchsim import run_plan, write_log
from tests.helpers import to_toml
from tests.test_identify import changed, random_model


def run(args: list[str], capsys) -> tuple[int, str, str]:
    """(exit code, stdout, stderr) of one kinetab command."""
    try:
        kinetab.main(args)
        code = 0
    except SystemExit as exc:
        code = int(exc.code or 0)
    out = capsys.readouterr()
    return code, out.out, out.err


@pytest.fixture(scope="module")
def bench(tmp_path_factory):
    """A random vehicle's model file, a truth 10-30 % off in eight parameters, and one level on-floor
    log (15 s at 1 ms) recorded with the model."""
    folder = tmp_path_factory.mktemp("bench")
    doc, _, rng = random_model(31)
    doc["name"] = "courier"
    path = folder / "courier.toml"
    path.write_text(to_toml(doc), encoding="utf-8")
    v = model.load(path)
    truth, _ = changed(v, rng)
    plan = campaign.plan_for(v, campaign.Candidate("on-floor", 0.0, 0.0), duration_s=15, period_s=0.001)
    (log,) = run_plan(v, truth, plan, rig="on-floor", noise_a=0.01 * v.drive.current_limit_a)
    return folder, path, write_log(log, folder / "floor.csv", v)


def test_one_log_fit_holds_the_inseparable_group_writes_only_what_loads(bench, capsys):
    """One level on-floor log at one payload: exit 0; Coulomb and both rolling resistances not written,
    each held or fitted but imprecise (which, this log leaves on a knife edge: a change of 1e-9 in its
    numbers, or of the simulator's integration, tips it), and a combination named; the written model
    loads and leaves those keys as they were."""
    folder, path, log = bench
    out_path = folder / "fitted.toml"
    code, out, err = run(["bench", "fit", str(path), str(log), "--write", str(out_path)], capsys)
    assert code == 0, err
    held = [line for line in out.splitlines() if line.startswith("held at the model's values")]
    unwritten = held + [line for line in out.splitlines() if "not written" in line]
    for key in ("friction.coulomb", "wheels.rolling_resistance", "casters.rolling_resistance"):
        assert any(key in line for line in unwritten), (key, out)
    assert "the logs determine" in out
    before, after = model.load(path), model.load(out_path)
    assert after.friction.coulomb_n == before.friction.coulomb_n
    assert after.wheels.rolling_resistance == before.wheels.rolling_resistance
    assert after.casters.rolling_resistance == before.casters.rolling_resistance
    # the report says whether the written model still fails compare on the log, as compare itself does
    code, _, _ = run(["bench", "compare", str(out_path), str(log), "--accept-other-model"], capsys)
    assert ("the written model still fails compare on: floor.csv" in out) == (code == 1)


def test_fit_without_write_is_a_dry_run(bench, capsys):
    folder, path, log = bench
    listing = sorted(p.name for p in folder.iterdir())
    text = path.read_text()
    code, out, _ = run(["bench", "fit", str(path), str(log), "--json"], capsys)
    doc = json.loads(out)
    assert code == 0 and doc["written"] is None and doc["estimates"]
    assert all("unit" in e and "standard_error" in e for e in doc["estimates"])
    assert sorted(p.name for p in folder.iterdir()) == listing and path.read_text() == text


def test_the_held_values_assumed_spread_widens_only_what_rests_on_them(bench, capsys):
    """--held-spread states how far off the values the logs leave open are taken to be (default 25 %,
    JSON held_spread as a fraction). The held values' pull on the fitted ones is added as a variance
    (identify._held_spread), so a standard error's square grows at most as the spread's square between
    25 % and 50 %, and the values themselves do not move. A bad value is one line, exit 2."""
    _, path, log = bench
    docs = {}
    for spread in (None, "50"):
        extra = [] if spread is None else ["--held-spread", spread]
        code, out, err = run(["bench", "fit", str(path), str(log), "--json", *extra], capsys)
        assert code in (0, 1), err
        docs[spread] = json.loads(out)
    assert docs[None]["held_spread"] == 0.25 and docs["50"]["held_spread"] == 0.5
    base = {e["parameter"]: e for e in docs[None]["estimates"]}
    for e in docs["50"]["estimates"]:
        was = base[e["parameter"]]
        assert e["estimate"] == pytest.approx(was["estimate"], rel=1e-9), e["parameter"]
        assert was["standard_error"] <= e["standard_error"] * (1 + 1e-9) <= 2 * was["standard_error"] * (1 + 1e-9)
    code, _, err = run(["bench", "fit", str(path), str(log), "--held-spread", "-5"], capsys)
    assert code == 2 and "--held-spread" in err and len(err.strip().splitlines()) == 1, err


def test_a_log_from_another_model_is_refused_naming_both(bench, tmp_path, capsys):
    folder, path, log = bench
    other = tmp_path / "other.toml"
    other.write_text(path.read_text().replace('name = "courier"', 'name = "tug"'))
    for command in (["bench", "fit", str(other), str(log)], ["bench", "compare", str(other), str(log)]):
        code, out, err = run(command, capsys)
        assert code == 2 and out == "" and len(err.strip().splitlines()) == 1
        assert "'courier'" in err and "'tug'" in err and "--accept-other-model" in err
    code, out, err = run(["bench", "compare", str(other), str(log), "--accept-other-model"], capsys)
    assert code in (0, 1) and "warning:" in err and "'tug'" in err and out


def test_a_log_cut_short_of_what_its_side_file_says_is_refused(bench, tmp_path, capsys):
    """Rows cut from a log whose side file says how many the run wrote: exit 2 naming both numbers; a line
    cut in the middle is named by its number."""
    folder, path, log = bench
    rows = log.read_text().splitlines()
    cut = tmp_path / "cut.csv"
    cut.write_text("\n".join(rows[:2001]) + "\n")
    meta = json.loads(log.with_suffix(".json").read_text()) | {"log_rows": len(rows) - 1}
    cut.with_suffix(".json").write_text(json.dumps(meta))
    code, out, err = run(["bench", "compare", str(path), str(cut)], capsys)
    assert code == 2 and f"holds 2000 rows, but cut.json says the run wrote {len(rows) - 1}" in err and not out
    half = tmp_path / "half.csv"
    half.write_text("\n".join(rows[:40]) + "\n" + rows[40][:15] + "\n")
    code, _, err = run(["bench", "compare", str(path), str(half)], capsys)
    assert code == 2 and "half.csv:41: expected 18 columns" in err


def test_an_aborted_run_is_named_with_how_far_it_went(bench, tmp_path, capsys):
    folder, path, log = bench
    short = tmp_path / "short.csv"
    rows = log.read_text().splitlines()[:3001]
    short.write_text("\n".join(rows) + "\n")
    meta = json.loads(log.with_suffix(".json").read_text())
    meta.update(rows=60000, samples=3000, ended="fault: fifo dry (code 2) at sequence 3001")
    short.with_suffix(".json").write_text(json.dumps(meta))
    code, out, err = run(["bench", "compare", str(path), str(short)], capsys)
    assert "incomplete run: 3000 of 60000 samples (fault: fifo dry" in err and out


@pytest.mark.parametrize("where", ["file/x.png", "/proc/kinetab-x.png", "x.foo"])
def test_compare_plot_into_an_unwritable_place_is_one_line_before_any_analysis(bench, capsys, where, tmp_path):
    folder, path, log = bench
    (tmp_path / "file").write_text("a file, not a folder")
    target = where if where.startswith("/") else str(tmp_path / where)
    code, out, err = run(["bench", "compare", str(path), str(log), "--plot", target], capsys)
    assert code == 2 and out == "" and len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert not Path(target).exists()  # x.foo: a PNG under another name was written (regression, a trial)


def test_compare_plot_makes_its_folder_and_titles_the_verdict(bench, tmp_path, capsys):
    """Like every kinetab output, a plot into a folder that does not exist yet makes the folder."""
    folder, path, log = bench
    target = tmp_path / "nodir" / "x.png"
    code, out, err = run(["bench", "compare", str(path), str(log), "--plot", str(target)], capsys)
    assert code in (0, 1) and target.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and out


def test_a_plan_made_for_another_vehicle_is_refused_before_the_port_opens(bench, tmp_path, capsys):
    """bench plan writes PLAN.json naming its model; bench run of another model refuses it (exit 2 naming
    both, the port never opened) unless --accept-other-model, which warns (then the port fails)."""
    folder, path, _ = bench
    other = tmp_path / "other.toml"
    other.write_text(path.read_text().replace('name = "courier"', 'name = "porter"'), encoding="utf-8")
    plan = tmp_path / "p.csv"
    code, _, err = run(["bench", "plan", str(other), "-o", str(plan), "--duration", "6"], capsys)
    assert code == 0, err
    assert json.loads(plan.with_suffix(".json").read_text())["model_name"] == "porter"
    args = ["bench", "run", str(path), "--port", "/nonexistent/tty", "--plan", str(plan), "--yes"]
    args += ["--log", str(tmp_path / "log.csv")]
    code, out, err = run(args, capsys)
    assert code == 2 and "made for model 'porter'" in err and "not 'courier'" in err and "/nonexistent" not in err
    code, out, err = run([*args, "--accept-other-model"], capsys)
    assert "warning: " in err and "made for model 'porter'" in err and "/nonexistent" in err


def test_a_plan_outside_the_envelope_is_refused_before_the_port_opens(bench, tmp_path, capsys):
    """A plan at 5 x speed_max: exit 2 naming the row and the limit; the port (which does not exist) is
    never opened and no log is written; --outside-envelope would run it (then the port fails)."""
    folder, path, _ = bench
    v = model.load(path)
    plan = planner.make_plan(v, duration_s=5, period_s=0.001, rig="on-floor")
    fast = planfile.Plan({k: (c * 5 if k.startswith("speed") else c) for k, c in plan.columns.items()}, plan.phase)
    outputs.write_file(tmp_path / "fast.csv", planfile.to_csv(fast))
    args = ["bench", "run", str(path), "--port", "/nonexistent/tty", "--plan", str(tmp_path / "fast.csv")]
    args += ["--log", str(tmp_path / "log.csv"), "--yes"]
    code, out, err = run(args, capsys)
    named = ("envelope.speed_max", "drive.supply_voltage", "drive.current_limit")
    assert code == 2 and any(k in err for k in named) and "row " in err and "/nonexistent" not in err
    assert not (tmp_path / "log.csv").exists()
    code, _, err = run([*args, "--outside-envelope"], capsys)
    assert code == 2 and "warning:" in err and "/nonexistent/tty" in err
    # the warning gives each limit's worst row and how many rows pass it, not only the first row: here the
    # supply voltage (the float model's motor voltage, recomputed here from dynamics)
    op = dynamics.OperatingPoint(**fast.si())
    currents = dynamics.rig_currents(v, op, "on-floor")
    limit, sides_beyond = v.drive.supply_voltage_v, 0
    for k_side, side in enumerate(("right", "left")):
        speed = np.asarray(fast.columns[f"speed_{side}"])
        volts = np.abs(dynamics.motor_voltage(v, currents[..., k_side], speed))
        beyond = int(np.sum(volts > limit * (1 + 1e-6)))
        if beyond:
            k = int(np.argmax(volts))
            said = f"worst row {k + 2}: {side} motor voltage {volts[k]:.4g} V beyond drive.supply_voltage ({limit:g} V)"
            assert f"{said} ({beyond} of {len(speed)} rows beyond)" in err, err
            sides_beyond += 1
    assert sides_beyond and err.count("worst row") >= sides_beyond


def test_bench_plan_takes_pitch_and_roll_and_names_ranges(bench, tmp_path, capsys):
    folder, path, _ = bench
    v = model.load(path)
    pitch = 0.5 * np.degrees(v.envelope.pitch_max_rad)
    code, _, err = run(
        ["bench", "plan", str(path), "-o", str(tmp_path / "p.csv"), "--duration", "6", "--pitch", f"{pitch} deg"],
        capsys,
    )
    assert code == 0, err
    p = planfile.read_plan(tmp_path / "p.csv")
    assert p.columns["pitch"] == pytest.approx(np.radians(pitch))
    code, _, err = run(["bench", "plan", str(path), "-o", str(tmp_path / "q.csv"), "--payload", "1e6"], capsys)
    assert code == 2 and "--payload" in err and "payload.mass_max" in err and "--pitch" not in err


def test_a_wheels_up_plan_refuses_a_pitch_or_roll_it_would_ignore(bench, tmp_path, capsys):
    """Regression (a trial): `bench plan --rig wheels-up --pitch 3 deg` wrote the pitch into a plan for a
    rig that leaves gravity out of the model. Now one line, exit 2, no plan written."""
    _, path, _ = bench
    out = tmp_path / "up.csv"
    args = ["bench", "plan", str(path), "-o", str(out), "--duration", "6", "--rig", "wheels-up"]
    code, _, err = run([*args, "--pitch", "1 deg", "--roll", "1 deg"], capsys)
    assert code == 2 and "--pitch and --roll" in err and "wheels-up" in err and len(err.strip().splitlines()) == 1
    assert not out.exists()
    code, _, err = run([*args, "--payload", "1 kg"], capsys)
    assert code == 0 and out.exists(), err


def test_campaign_writes_plans_inside_the_envelope_and_the_steps(bench, tmp_path, capsys):
    folder, path, _ = bench
    out_dir = tmp_path / "camp"
    code, out, err = run(["bench", "campaign", str(path), "-o", str(out_dir), "--duration", "8"], capsys)
    assert code == 0, err
    plans = sorted(out_dir.glob("*.csv"))
    v = model.load(path)
    assert plans and (out_dir / "CAMPAIGN.txt").read_text() == out.rstrip("\n") + "\n"
    assert "wheels-up" in plans[0].name and "--rig wheels-up" in out and "bench fit" in out
    for p in plans:
        rig = "wheels-up" if "wheels-up" in p.name else "on-floor"
        assert planner.plan_problem(v, planfile.read_plan(p), rig) is None


def test_a_plan_whose_time_does_not_rise_by_one_period_per_row_is_refused(bench, tmp_path, capsys):
    """The controller consumes one row per tick, so a row missing (t jumps two periods) or a step that
    changes is refused with the file and line, before the port is opened."""
    folder, path, _ = bench
    v = model.load(path)
    plan = planner.make_plan(v, duration_s=5, period_s=0.002, rig="on-floor")
    lines = planfile.to_csv(plan).splitlines(keepends=True)
    del lines[40]  # the data row with t = 39 periods: line 41 now jumps by two
    (tmp_path / "gap.csv").write_text("".join(lines), encoding="utf-8")
    args = ["bench", "run", str(path), "--port", "/nonexistent/tty", "--plan", str(tmp_path / "gap.csv")]
    code, _, err = run([*args, "--log", str(tmp_path / "log.csv"), "--yes"], capsys)
    assert code == 2 and f"{tmp_path / 'gap.csv'}:41:" in err and "one control period per row" in err
    assert "/nonexistent" not in err and not (tmp_path / "log.csv").exists()
    assert planfile.period_s(plan) == pytest.approx(0.002)


def test_a_plan_says_how_many_parameters_it_determines_not_a_bare_condition_number():
    """One column's condition number is 1 whatever the data (Golub and Van Loan's definition, from
    memory): a plan that determines one parameter, or none, must not read as perfectly conditioned."""
    from kinetab.hil import excite, fitparams

    n = len(fitparams.NAMES)
    assert excite.told_apart([], float("inf")) == f"the fit could determine none of its {n} parameters from it"
    one = excite.told_apart(["body.mass"], 1.0)
    assert one == f"the fit could determine 1 of its {n} parameters (body.mass)" and "condition" not in one
    many = excite.told_apart(list(fitparams.NAMES[:5]), 12.345)
    assert many == f"the fit could determine 5 of its {n} parameters, condition number 12.3"


@pytest.mark.parametrize(
    ("edit", "said"),
    [
        (lambda lines: [lines[0].rstrip("\n") + ",extra\n", *(x.rstrip("\n") + ",0\n" for x in lines[1:])], ":1: "),
        (lambda lines: [*lines[:9], lines[9].rsplit(",", 1)[0] + ",flying\n", *lines[10:]], ":10: phase: unknown"),
        (lambda lines: [*lines[:9], "nan," + lines[9].split(",", 1)[1], *lines[10:]], ":10: t: expected a finite"),
        (lambda lines: [*lines[:9], lines[9].split(",", 1)[1], *lines[10:]], ":10: expected"),
    ],
    ids=["extra column", "unknown phase", "nan", "short row"],
)
def test_a_malformed_plan_is_refused_naming_the_line_before_the_port_opens(bench, tmp_path, capsys, edit, said):
    """A plan file is what the controller will be told to do: an extra column, an unknown phase, a value
    that is not a finite number or a row of the wrong width is one line naming file:line (and column)."""
    folder, path, _ = bench
    v = model.load(path)
    plan = planner.make_plan(v, duration_s=5, period_s=0.002, rig="on-floor")
    (tmp_path / "bad.csv").write_text("".join(edit(planfile.to_csv(plan).splitlines(keepends=True))))
    args = ["bench", "run", str(path), "--port", "/nonexistent/tty", "--plan", str(tmp_path / "bad.csv")]
    code, out, err = run([*args, "--log", str(tmp_path / "log.csv"), "--yes"], capsys)
    assert code == 2 and f"{tmp_path / 'bad.csv'}{said}" in err and len(err.strip().splitlines()) == 1, err
    assert "/nonexistent" not in err and not (tmp_path / "log.csv").exists()


def test_the_same_log_twice_is_refused_naming_both(bench, tmp_path, capsys):
    """One run given twice (or a copy of it under another name) would count its rows twice and make the
    error bars smaller than the data allows: one line naming both files, nothing fitted."""
    import shutil

    folder, path, log = bench
    copy = tmp_path / "again.csv"
    shutil.copy(log, copy)
    if log.with_suffix(".json").exists():
        shutil.copy(log.with_suffix(".json"), copy.with_suffix(".json"))
    for logs in ([log, log], [log, copy]):
        code, out, err = run(["bench", "fit", str(path), *map(str, logs)], capsys)
        assert code == 2 and out == "" and len(err.strip().splitlines()) == 1, err
        assert f"{logs[1]}: the same log as {logs[0]}" in err


def test_the_worst_row_of_a_signed_input_is_the_largest_excess_either_way(bench):
    """A pitch 10 % beyond its limit nose down and 100 % beyond nose up: the worst is the second. An
    unsigned input below zero (a negative payload) is beyond its range by the range plus how far below."""
    folder, path, _ = bench
    v = model.load(path)
    top = v.envelope.pitch_max_rad
    e = planner._outside(v, interface.PITCH, "pitch", np.array([0.0, -1.1 * top, 2.0 * top]))
    assert e is not None and (e.first, e.worst, e.count) == (1, 2, 2)
    cap = v.payload.mass_max_kg
    e = planner._outside(v, interface.PAYLOAD, "payload", np.array([0.0, 1.01 * cap, -0.5 * cap]))
    assert e is not None and (e.first, e.worst, e.count) == (1, 2, 2)


def test_a_fit_that_holds_parameters_on_noisy_logs_says_how_to_plan_for_that_noise():
    """bench campaign plans for 1 % of the current limit unless told; logs noisier than that separate
    less than it planned, so the fit (when it holds something) names the --noise that plans for them."""
    from kinetab.hil import fitreport

    noisy = {"held": [{"parameters": ["x"]}], "current_noise_a": {"logs": 0.2, "campaign_default": 0.06}}
    (line,) = fitreport._noise_hint(noisy)
    assert "(200 mA)" in line and "(60 mA)" in line and "`bench campaign --noise '200 mA'`" in line
    assert fitreport._noise_hint({**noisy, "held": []}) == []
    quiet = {**noisy, "current_noise_a": {"logs": 0.02, "campaign_default": 0.06}}
    assert fitreport._noise_hint(quiet) == []


def test_fit_json_marks_derived_keys_it_writes_and_checks_the_written_envelope(bench, tmp_path, capsys):
    """--json: every estimate carries its note; a derived key the file gets (breakaway, back-driving
    efficiency) is marked written; the written model's envelope problems are those `envelope` finds in
    the file written."""
    from kinetab.generator import envelope

    folder, path, log = bench
    target = tmp_path / "fitted.toml"
    code, out, err = run(["bench", "fit", str(path), str(log), "--json", "--write", str(target)], capsys)
    assert code == 0, err
    doc = json.loads(out)
    assert all(e["note"] for e in doc["estimates"])
    for e in doc["estimates"]:
        key = {"friction.breakaway": "friction.breakaway", "drive.backdrive_efficiency": "drive.backdrive_efficiency"}
        if e["parameter"] in key:
            assert e["written"] == (key[e["parameter"]] in doc["model_changes"])
    assert doc["written_envelope_problems"] == envelope.problems(model.load(target))


def test_a_log_that_would_overwrite_the_plan_or_the_model_is_refused(bench, tmp_path, capsys):
    """Regression (a trial): --log given the plan's own path replaced the plan and its PLAN.json with the
    log. Now exit 2 naming what it would overwrite, before the port is opened; the plan is intact."""
    folder, path, _ = bench
    v = model.load(path)
    plan = tmp_path / "short.csv"
    outputs.write_set({plan: planfile.to_csv(planner.make_plan(v, duration_s=5, period_s=0.001, rig="on-floor")),
                       planfile.side_file(plan): planfile.side_text(v)})  # fmt: skip
    before = plan.read_bytes(), planfile.side_file(plan).read_bytes()
    for log, what in ((plan, "the plan"), (tmp_path / "short.txt", "the plan's side file"), (path, "the model")):
        args = [
            "bench",
            "run",
            str(path),
            "--port",
            "/nonexistent/tty",
            "--plan",
            str(plan),
            "--log",
            str(log),
            "--yes",
        ]
        code, out, err = run(args, capsys)
        assert code == 2 and f"would overwrite {what}" in err and "/nonexistent" not in err, err
    assert (plan.read_bytes(), planfile.side_file(plan).read_bytes()) == before


def test_a_plan_runs_on_the_rig_it_was_made_for(bench, tmp_path, capsys):
    """Regression (a trial): a wheels-up plan run without --rig got the on-floor feed-forward and was
    logged as on-floor. PLAN.json now records the rig: bench run takes it by default and refuses the
    other one (exit 2, naming both) before the port is opened."""
    from kinetab.hil import runner

    folder, path, _ = bench
    plan = tmp_path / "up.csv"
    code, _, err = run(["bench", "plan", str(path), "--rig", "wheels-up", "--duration", "5", "-o", str(plan)], capsys)
    assert code == 0, err
    assert planfile.plan_rig(plan) == "wheels-up" and runner._rig(plan, None) == "wheels-up"
    args = ["bench", "run", str(path), "--port", "/nonexistent/tty", "--plan", str(plan), "--yes"]
    code, _, err = run([*args, "--log", str(tmp_path / "log.csv"), "--rig", "on-floor"], capsys)
    assert code == 2 and "made for the wheels-up rig" in err and "--rig on-floor" in err
    assert runner._rig(tmp_path / "none.csv", None) == "on-floor"  # no side file: as before


def test_a_log_of_an_earlier_state_of_the_model_is_named_so(bench, tmp_path, capsys):
    """Same model name, another fingerprint (a value changed since the run): exit 2 saying the model
    changed, not "recorded with model 'courier' ... not 'courier'" as a trial read."""
    folder, path, log = bench
    from kinetab.generator import model_edit

    changed_model = tmp_path / "courier.toml"

    new_text, _ = model_edit.edited_text(path.read_text(), {"friction.viscous": 1.234}, str(changed_model))
    changed_model.write_text(new_text, encoding="utf-8")
    code, _, err = run(["bench", "compare", str(changed_model), str(log)], capsys)
    assert code == 2 and "another state of model 'courier'" in err and "not 'courier'" not in err, err


@pytest.mark.parametrize(
    ("args", "option"),
    [
        (["compare", "{model}", "{log}", "--tolerance", "-5 mA"], "--tolerance"),
        (["compare", "{model}", "{log}", "--tolerance", "0"], "--tolerance"),
        (["campaign", "{model}", "-o", "{out}", "--noise", "-1 A"], "--noise"),
        (["simulate", "{model}", "--noise", "-0.1"], "--noise"),
    ],
)
def test_negative_tolerances_and_noises_are_refused(bench, tmp_path, capsys, args, option):
    """A trial's campaign printed "with -1000 mA of current noise" and compare took a tolerance of -5 mA
    (always failing): now exit 2 naming the option."""
    folder, path, log = bench
    filled = [a.format(model=path, log=log, out=tmp_path / "c") for a in args]
    code, _, err = run(["bench", *filled], capsys)
    assert code == 2 and option in err and not (tmp_path / "c").exists(), err


def test_a_log_whose_last_line_was_cut_mid_write_is_used_without_that_line(bench, tmp_path, capsys):
    """Regression (a trial): a run killed mid-write (power lost) left a last line without its line end, and
    the whole log was refused although README says the rows recorded are used. Now that line is left out
    with a warning; LOG.json still saying `running` (the run never finished) is named too."""
    folder, path, log = bench
    rows = log.read_text().splitlines()
    cut = tmp_path / "cut.csv"
    cut.write_text("\n".join(rows[:3001]) + "\n" + rows[3001][:20])
    meta = json.loads(log.with_suffix(".json").read_text())
    meta = {k: x for k, x in meta.items() if k not in ("samples", "log_rows")} | {"ended": "running"}
    cut.with_suffix(".json").write_text(json.dumps(meta))
    code, out, err = run(["bench", "compare", str(path), str(cut), "--json"], capsys)
    assert json.loads(out)["rows"] <= 3000 and code in (0, 1), err
    assert "never finished" in err and "last line was cut mid-write" in err and "using the 3000 rows" in err


def test_the_fit_names_the_verify_check_a_written_model_would_fail(bench):
    """Regression (a trial): a fitted file built (with a warning) and then failed `kinetab verify`'s
    current-step check, and the fit had said nothing. fitreport.gate_problems runs verify's own checks on
    the written model: a margin far below any real step fails, the model's own margin passes."""
    import dataclasses

    from kinetab.hil import fitreport

    folder, path, _ = bench
    v = model.load(path)
    tight = dataclasses.replace(v, firmware=dataclasses.replace(v.firmware, current_step_margin_a=1e-9))
    problems = fitreport.gate_problems(tight)
    assert len(problems) == 1 and problems[0].startswith("current step:") and "current_step_margin" in problems[0]
    assert fitreport.gate_problems(v) == []


def test_compare_warns_when_rig_overrides_the_one_the_run_recorded(bench, capsys):
    """Regression (a trial): `bench compare --rig wheels-up` on an on-floor log failed with an RMS of
    hundreds of mA and no word that the rig it was judged on was not the one it ran on."""
    folder, path, log = bench
    code, _, err = run(["bench", "compare", str(path), str(log), "--rig", "wheels-up"], capsys)
    assert code in (0, 1) and f"warning: {log}: taken as wheels-up (--rig), though its run recorded on-floor" in err
    code, _, err = run(["bench", "compare", str(path), str(log), "--rig", "on-floor"], capsys)
    assert code in (0, 1) and "--rig" not in err


def test_an_accepted_log_from_beyond_the_models_envelope_is_named_in_a_warning(bench, tmp_path, capsys):
    """Regression (a trial): a small vehicle's fit took a big one's logs (--accept-other-model), at twenty
    times its payload and faster than its speed_max, warning only that the model's name differed."""
    import tomllib

    _, path, log = bench
    ran = benchdata.read_log(log, None, model.load(path)).setpoint
    fastest = float(max(np.max(np.abs(ran["speed_right"])), np.max(np.abs(ran["speed_left"]))))
    doc = tomllib.loads(path.read_text())
    doc["name"] = "tug"
    speed_max = 2 * fastest / 3  # the log drove faster than this model may
    doc["envelope"]["speed_max"] = f"{speed_max} m/s"
    doc["friction"]["deadband"] = f"{speed_max / 20} m/s"
    other = tmp_path / "tug.toml"
    other.write_text(to_toml(doc))
    code, out, err = run(["bench", "compare", str(other), str(log), "--accept-other-model"], capsys)
    assert code in (0, 1) and f"warning: {log}: the run went beyond this model's envelope (speed " in err
    assert f"speed {fastest:.4g} m/s > envelope.speed_max {speed_max:.4g} m/s)" in err, err
    code, out, err = run(["bench", "compare", str(path), str(log)], capsys)
    assert "beyond this model's envelope" not in err


def test_an_accepted_log_past_the_body_frame_limits_is_named_in_a_warning(bench, tmp_path, capsys):
    """Review: the envelope warning checked each wheel's speed, payload and tilt only. A model whose
    forward speed and acceleration limits (envelope keys) are two thirds of what the log did is named on
    both: P's speed is (u_R + u_L)/2 and its acceleration (a_R + a_L)/2 (docs/physics.md)."""
    import tomllib

    _, path, log = bench
    v = model.load(path)
    ran = benchdata.read_log(log, None, v).setpoint
    forward = float(np.max(np.abs(ran["speed_right"] + ran["speed_left"]))) / 2
    forward_accel = float(np.max(np.abs(ran["accel_right"] + ran["accel_left"]))) / 2
    assert forward > 0 and forward_accel > 0
    doc = tomllib.loads(path.read_text())
    doc["envelope"]["forward_speed_max"] = f"{2 * forward / 3} m/s"
    doc["envelope"]["forward_accel_max"] = f"{2 * forward_accel / 3} m/s^2"
    other = tmp_path / "narrow.toml"
    other.write_text(to_toml(doc))
    code, _, err = run(["bench", "compare", str(other), str(log), "--accept-other-model"], capsys)
    assert code in (0, 1) and f"warning: {log}: the run went beyond this model's envelope (" in err, err
    assert f"forward speed {forward:.4g} m/s > envelope.forward_speed_max {2 * forward / 3:.4g} m/s" in err, err
    assert f"forward acceleration {forward_accel:.4g} m/s^2 > envelope.forward_accel_max" in err, err
    assert "> envelope.speed_max" not in err and "> envelope.accel_max" not in err


def test_a_turn_past_the_yaw_limits_is_named_and_one_inside_them_is_not(bench):
    """The yaw rate is (u_R - u_L)/track and the yaw acceleration (a_R - a_L)/track (docs/physics.md):
    a spin at 1.5 times the model's yaw limits is named on both, in deg/s and deg/s^2; the same spin at
    half of them is not."""
    import dataclasses
    from types import SimpleNamespace

    from kinetab.hil import fitreport

    _, path, _ = bench
    v = model.load(path)
    track = v.wheels.track_m
    rate, accel = v.envelope.speed_max_mps / track, v.envelope.accel_max_mps2 / track  # half the wheels' spin
    env = dataclasses.replace(v.envelope, yaw_rate_max_radps=rate, yaw_accel_max_radps2=accel)
    v = dataclasses.replace(v, envelope=env)
    deg = 180 / np.pi
    for k, named in ((1.5, True), (0.5, False)):
        u, a = k * rate * track / 2, k * accel * track / 2  # each wheel, opposite ways
        sp = {"speed_right": np.array([0, u]), "speed_left": np.array([0, -u])}
        sp |= {"accel_right": np.array([a, 0]), "accel_left": np.array([-a, 0])}
        assert u < v.envelope.speed_max_mps and a < v.envelope.accel_max_mps2  # only the yaw limits
        text = fitreport._beyond_envelope(v, SimpleNamespace(path="spin.csv", setpoint=sp))
        assert (f"yaw rate {k * rate * deg:.4g} deg/s > envelope.yaw_rate_max {rate * deg:.4g} deg/s" in text) == named
        assert (f"yaw acceleration {k * accel * deg:.4g} deg/s^2 > envelope.yaw_accel_max" in text) == named
        assert (text == "") != named, text
