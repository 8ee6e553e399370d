"""The lift on the bench without the link: the simulated lift plant against the lift model, the filter
against scipy's Savitzky-Golay derivative, lift plans inside the limits, the plan file, and compare and fit
recovering changed truths of invented vehicles with invented lifts (tests/liftsim.py) from in-process
logs. The end-to-end run over the real link C is in test_bench_e2e.py."""

from __future__ import annotations

import json

import numpy as np
import pytest
from kinetab.generator import lift
from kinetab.generator.errors import UserError
from kinetab.hil import liftcompare, liftfit, liftlog, liftplan
from kinetab.hil.liftplant import accel_from_torque

from tests.helpers import to_toml, vehicle_from
from tests.liftsim import changed_truth, feasible_lift_doc, run_lift_plan, write_lift_log
from tests.test_bench_checks import run as run_cli


@pytest.mark.parametrize("seed", range(6))
def test_the_plant_inverts_the_lift_model(seed):
    """accel_from_torque(motor_torque(p, v, a)) == a on both efficiency branches and in the blend band
    (the model itself is checked against a sympy Lagrange derivation in test_lift.py)."""
    lt = vehicle_from(feasible_lift_doc(seed)).lift
    assert lt is not None
    rng = np.random.default_rng(seed)
    for _ in range(200):
        p = rng.uniform(0, lt.payload_max_kg)
        v = rng.choice([0.0, rng.uniform(-1, 1) * lt.speed_max_mps, rng.uniform(-2, 2) * lift.blend_width(lt)])
        a = rng.uniform(-1, 1) * lt.accel_max_mps2
        torque = float(lift.motor_torque(lt, p, v, a))
        assert accel_from_torque(lt, torque, p, v) == pytest.approx(a, rel=1e-9, abs=1e-9 * lt.accel_max_mps2)


def test_the_filter_is_scipys_savitzky_golay_derivative():
    """liftlog.motion's acceleration equals scipy.signal.savgol_filter(deriv=1, quadratic) away from the
    ends (the reference implementation), and its weights sum to one."""
    from scipy.signal import savgol_filter

    rng = np.random.default_rng(3)
    t = np.arange(2000) * 0.001
    log = liftlog.LiftLog(
        path=liftplan.Path("x.csv"),
        t=t,
        phase=np.array(["holding"] * len(t)),
        setpoint={"speed_mps": t * 0, "accel_mps2": t * 0, "payload_kg": t * 0},
        ff=t * 0,
        current=rng.normal(size=len(t)),
        speed=np.cumsum(rng.normal(size=len(t))) * 0.01,
        valid=np.ones(len(t), dtype=bool),
    )
    m = liftlog.motion(log, 1e-6)  # speeds that are no count lattice: taken as they are
    want = savgol_filter(log.speed, 2 * m.half + 1, 2, deriv=1, delta=0.001)
    assert np.allclose(m.accel[~m.edge], want[~m.edge], atol=1e-9)
    assert liftlog.weights(m.half).sum() == pytest.approx(1.0)
    flags = np.array([0] * 10 + [1] * 10 + [0] * 10)
    assert np.flatnonzero(~liftlog.steady(flags, 3)).tolist() == [7, 8, 9, 10, 11, 12, 17, 18, 19, 20, 21, 22]


@pytest.mark.parametrize("seed", range(5))
def test_lift_plans_stay_inside_the_limits(seed):
    """Every plan: within speed, acceleration, load and travel, below 90 % of the current limit; from rest
    at the bottom back to rest at the bottom; speeds are the running sum of the accelerations (the
    setpoint's speed is where its period ends)."""
    v = vehicle_from(feasible_lift_doc(seed))
    assert v.lift is not None
    for load in (0.0, v.lift.payload_max_kg):
        plan = liftplan.make_plan(v, period_s=0.001, payload_kg=load)
        assert liftplan.plan_problem(v, plan) is None
        si = plan.si()
        assert np.allclose(np.cumsum(si["accel_mps2"]) * 0.001, si["speed_mps"])
        assert si["speed_mps"][0] == si["speed_mps"][-1] == 0 and abs(liftplan.positions(plan)[-1]) < 1e-9
        assert {"holding", "raising", "lowering"} <= set(plan.phase)
        assert np.max(si["speed_mps"]) > 0.5 * v.lift.speed_max_mps or v.lift.travel_m < v.lift.speed_max_mps


def test_a_lift_plan_round_trips_and_bad_ones_are_named(tmp_path):
    v = vehicle_from(feasible_lift_doc(7))
    assert v.lift is not None
    plan = liftplan.make_plan(v, period_s=0.002, payload_kg=v.lift.payload_max_kg / 2)
    path = tmp_path / "lift.csv"
    path.write_text(liftplan.to_csv(plan))
    back = liftplan.read_plan(path)
    assert back.phase == plan.phase and all(np.allclose(back.columns[c], plan.columns[c]) for c in liftplan.COLUMNS)
    lines = path.read_text().splitlines()
    cells = lines[5].split(",")
    lines[5] = ",".join([cells[0], "fast", *cells[2:]])
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(UserError, match=r"lift.csv:6: lift_speed: expected a finite number, found 'fast'"):
        liftplan.read_plan(path)
    fast = liftplan.LiftPlan({**plan.columns, "lift_speed": plan.columns["lift_speed"] * 1.5}, plan.phase)
    assert "lift.speed_max" in (liftplan.plan_problem(v, fast) or "")


def _logs(doc, truth_doc, loads, seed, noise=0.03):
    v, truth = vehicle_from(doc), vehicle_from(truth_doc)
    plans = [liftplan.make_plan(v, period_s=0.001, payload_kg=p) for p in loads]
    return v, truth, [run_lift_plan(v, truth, p, noise_a=noise, seed=seed + k) for k, p in enumerate(plans)]


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_the_fit_recovers_a_changed_truth(seed):
    """Two loads (10 % and 90 % of lift.payload_max): every fitted value within 4 standard errors of the
    truth (HAC errors; the coverage test checks their size); compare passes the truth on its own logs and
    fails the model the runs started from."""
    doc = feasible_lift_doc(seed)
    truth_doc = changed_truth(doc, np.random.default_rng(seed))
    payload_max = vehicle_from(doc).lift.payload_max_kg
    v, truth, logs = _logs(doc, truth_doc, [0.1 * payload_max, 0.9 * payload_max], seed)
    f = liftfit.fit(v, logs)
    for e in f.estimates:
        true = getattr(truth.lift, liftfit.FIELD[e.name])
        assert not e.held, (e.name, e.held)
        assert abs(e.value - true) <= 4 * e.sigma, (e.name, e.value, e.sigma, true)
    assert all(liftcompare.compare(truth, log)["passed"] for log in logs)
    assert not any(liftcompare.compare(v, log)["passed"] for log in logs)


def test_one_load_holds_the_efficiency_and_says_which_run_separates_it():
    doc = feasible_lift_doc(4)
    truth_doc = changed_truth(doc, np.random.default_rng(4))
    v = vehicle_from(doc)
    logs = _logs(doc, truth_doc, [0.5 * v.lift.payload_max_kg], 4)[2]
    f = liftfit.fit(v, logs)
    held = {e.name: e.held for e in f.estimates if e.held}
    assert list(held) == ["efficiency"] and "--lift-payload" in held["efficiency"]
    assert "lift.efficiency" not in f.changes()


def test_cli_lift_loop_on_files(tmp_path, capsys):
    """bench plan --axis lift, compare and fit on lift logs written as bench run writes them: the fit
    writes the lift keys, the written model loads, compare passes it; mistakes are one line, exit 2."""
    doc = feasible_lift_doc(5)
    truth_doc = changed_truth(doc, np.random.default_rng(5))
    model = tmp_path / "hoist.toml"
    model.write_text(to_toml(doc))
    v = vehicle_from(doc)
    code, out, err = run_cli(
        ["bench", "plan", str(model), "--axis", "lift", "--lift-payload", "1", "-o", str(tmp_path / "p.csv")], capsys
    )
    assert code == 0, err
    assert "carriage at the bottom" in out and (tmp_path / "p.json").exists()
    logs = _logs(doc, truth_doc, [0.1 * v.lift.payload_max_kg, 0.9 * v.lift.payload_max_kg], 5)[2]
    paths = [str(write_lift_log(log, tmp_path / f"log{k}.csv", v)) for k, log in enumerate(logs)]
    code, out, _ = run_cli(["bench", "compare", str(model), paths[0]], capsys)
    assert code == 1 and "FAIL" in out
    fitted = tmp_path / "fitted.toml"
    code, out, err = run_cli(["bench", "fit", str(model), *paths, "--write", str(fitted), "--json"], capsys)
    assert code == 0, err
    doc_out = json.loads(out)
    assert doc_out["compare_fails_after"] == [] and all(e["written"] for e in doc_out["estimates"])
    new = vehicle_from_file(fitted)
    assert new.lift is not None and new.lift.efficiency != v.lift.efficiency
    code, out, err = run_cli(["bench", "compare", str(fitted), paths[1], "--accept-other-model"], capsys)
    assert code == 0 and "PASS" in out
    plain = tmp_path / "plain.toml"
    plain.write_text(to_toml({k: val for k, val in doc.items() if k != "lift"}))
    for args, words in (
        (["bench", "compare", str(plain), paths[0]], "has no [lift] section"),
        (["bench", "plan", str(plain), "--axis", "lift", "-o", str(tmp_path / "q.csv")], "has no [lift] section"),
        (
            ["bench", "plan", str(model), "--axis", "lift", "--lift-payload", "1 t", "-o", str(tmp_path / "q.csv")],
            "--lift-payload",
        ),
        (["bench", "plan", str(model), "--axis", "lift", "--for-fit", "-o", str(tmp_path / "q.csv")], "--for-fit"),
        (["bench", "compare", str(model), paths[0], "--rig", "wheels-up"], "a lift log has none"),
        (["bench", "fit", str(model), *paths, "--rig", "on-floor", "--write", str(tmp_path / "q.toml")], "--rig"),
    ):
        code, out, err = run_cli(args, capsys)
        assert code == 2 and words in err and len(err.strip().splitlines()) == 1, (args, err)
    assert not (tmp_path / "q.csv").exists() and not (tmp_path / "q.toml").exists()


def vehicle_from_file(path):
    from kinetab.generator import model

    return model.load(str(path))


@pytest.mark.slow  # 12 fits of two simulated logs each (~40 s)
def test_the_error_bars_cover_the_truth():
    """Over 12 changed truths of one invented lift, each fitted value lies within 2 standard errors of the
    truth in at least 9 of 12 (about 95 % expected for honest error bars; fewer than 9 of 12 happens by
    chance with probability 0.3 %, binomial)."""
    doc = feasible_lift_doc(8)
    v = vehicle_from(doc)
    hits = dict.fromkeys(liftfit.FREE, 0)
    for k in range(12):
        truth_doc = changed_truth(doc, np.random.default_rng(100 + k))
        logs = _logs(doc, truth_doc, [0.1 * v.lift.payload_max_kg, 0.9 * v.lift.payload_max_kg], 200 + 2 * k)[2]
        truth = vehicle_from(truth_doc).lift
        for e in liftfit.fit(v, logs).estimates:
            hits[e.name] += abs(e.value - getattr(truth, liftfit.FIELD[e.name])) <= 2 * (e.sigma or 0)
    assert min(hits.values()) >= 9, hits
