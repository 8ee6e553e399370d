"""`kinetab bench fit` from start to end: read and check the logs, fit, report every estimate with its
unit and standard error, what was held and which further log would separate it, and (only when asked)
write the model through the model writer (comments, layout and units kept)."""

from __future__ import annotations

import json
from collections.abc import Callable
from pathlib import Path
from typing import Any

import click
import numpy as np
from kinetab.generator import envelope, gate, model, model_edit, outputs, units
from kinetab.generator.errors import InternalError, ModelError, UserError

from . import benchdata, campaign, compare, identifiability, identify
from . import fitparams as fp

REL_PERCENT = f"{100 * identifiability.REL_TOL:g}"  # what a written estimate's standard error may be, % of its size

UNIT_KEY = {
    "body.mass": "body.mass",
    "friction.coulomb": "friction.coulomb",
    "friction.breakaway_excess": "friction.breakaway",
    "friction.breakaway": "friction.breakaway",
    "friction.viscous": "friction.viscous",
    "friction.stribeck_speed": "friction.stribeck_speed",
}
"""Fit quantities shown in the unit the user wrote for this model key."""


def checked_logs(
    v: Any, paths: list[Path], *, rig: str | None, accept_other_model: bool, read: Callable[[Path], Any] | None = None
) -> list[Any]:
    """Read the logs (drive logs, or with `read` another kind: liftlog.read_log); a log from another model
    or fingerprint is exit 2 (a warning when accepted on purpose); an incomplete run is a warning naming
    how far it went, and so is a --rig that overrides the rig the run recorded."""
    from kinetab.generator import synthesis

    mine, logs = synthesis.fingerprint(v), []
    seen: dict[str, Path] = {}
    for p in paths:
        log = read(p) if read is not None else benchdata.read_log(p, rig, v)
        digest = _digest(p)
        if digest in seen:  # the same run twice would count its rows twice and shrink the error bars
            raise UserError(f"{p}: the same log as {seen[digest]} (identical contents): give each run once")
        seen[digest] = p
        other, short = benchdata.origin_problems(v, log, mine)
        if other and not accept_other_model:
            raise UserError(f"{other}; pass --accept-other-model to use it anyway")
        recorded = benchdata.side_file(p).get("rig") if rig is not None and read is None else None
        overridden = (
            f"{p}: taken as {rig} (--rig), though its run recorded {recorded}" if recorded not in (None, rig) else ""
        )
        beyond = _beyond_envelope(v, log) if read is None else ""
        for text in (other, short, overridden, beyond):
            if text:
                click.echo(f"warning: {text}", err=True)
        logs.append(log)
    return logs


def _beyond_envelope(v: Any, log: Any) -> str:
    """Where a drive log's setpoints pass the model's envelope (a log from another vehicle, accepted on
    purpose): a warning naming the limits, or "". Regression (a trial): a small vehicle's fit took a big
    one's logs at twenty times its payload with no word but the model name's."""
    past = [
        f"{what} {worst * k:.4g} {unit} > {key} {limit * k:.4g} {unit}"
        for what, key, unit, k, worst, limit, step in _envelope_rows(v, log)
        if limit is not None and worst > limit * (1 + 1e-6) + step
    ]
    return f"{log.path}: the run went beyond this model's envelope ({'; '.join(past)})" if past else ""


def _envelope_rows(v: Any, log: Any) -> list[tuple[str, str, str, float, float, float | None, float]]:
    """(what, model key, unit, SI-to-unit factor, the log's largest |value|, the limit or None, the
    firmware step it may pass the limit by) for every envelope limit: each wheel, P's forward motion and
    the yaw (both from the wheel pair), payload, tilt. The step: the firmware's region rounds each limit
    up to whole steps (region._in_steps), so a setpoint on its edge may be up to a step past the SI limit."""
    env, sp, deg, fw = v.envelope, log.setpoint, 180 / np.pi, v.firmware

    most = lambda x: float(np.max(np.abs(x))) if np.size(x) else 0.0  # noqa: E731

    def pair(name: str) -> tuple[np.ndarray, np.ndarray]:
        empty = np.zeros(0)
        return np.ravel(sp.get(f"{name}_right", empty)), np.ravel(sp.get(f"{name}_left", empty))

    (ur, ul), (ar, al), track = pair("speed"), pair("accel"), v.wheels.track_m
    du, da = fw.speed_lsb_mps, fw.accel_lsb_mps2
    return [
        ("speed", "envelope.speed_max", "m/s", 1.0, max(most(ur), most(ul)), env.speed_max_mps, du),
        ("forward speed", "envelope.forward_speed_max", "m/s", 1.0, most((ur + ul) / 2), env.forward_speed_max_mps, du),
        (
            "yaw rate",
            "envelope.yaw_rate_max",
            "deg/s",
            deg,
            most((ur - ul) / track),
            env.yaw_rate_max_radps,
            2 * du / track,
        ),
        ("acceleration", "envelope.accel_max", "m/s^2", 1.0, max(most(ar), most(al)), env.accel_max_mps2, da),
        (
            "forward acceleration",
            "envelope.forward_accel_max",
            "m/s^2",
            1.0,
            most((ar + al) / 2),
            env.forward_accel_max_mps2,
            da,
        ),
        (
            "yaw acceleration",
            "envelope.yaw_accel_max",
            "deg/s^2",
            deg,
            most((ar - al) / track),
            env.yaw_accel_max_radps2,
            2 * da / track,
        ),
        ("payload", "payload.mass_max", "kg", 1.0, most(sp.get("payload_kg", 0.0)), v.payload.mass_max_kg, 0.0),
        ("pitch", "envelope.pitch_max", "deg", deg, most(sp.get("pitch_rad", 0.0)), env.pitch_max_rad, 0.0),
        ("roll", "envelope.roll_max", "deg", deg, most(sp.get("roll_rad", 0.0)), env.roll_max_rad, 0.0),
    ]


def _digest(path: Path) -> str:
    """SHA-256 of a log's bytes (read_log has read it already: it is readable)."""
    import hashlib

    return hashlib.sha256(path.read_bytes()).hexdigest()


def _phase_rms(v: Any, logs: list[benchdata.BenchLog]) -> tuple[dict[str, dict[str, float]], list[str]]:
    """compare's RMS per phase (both wheels), per log, A; and a line per log compare fails."""
    out, failing = {}, []
    for log in logs:
        doc = compare.compare(v, log)
        rows = {"all": doc["wheels"], **doc["phases"]}
        out[log.path.name] = {
            p: (d["right"]["rms"] ** 2 / 2 + d["left"]["rms"] ** 2 / 2) ** 0.5 for p, d in rows.items()
        }
        if not doc["passed"]:
            worst = max(w["rms"] for w in doc["wheels"].values())
            failing.append(f"{log.path.name}: {worst * 1000:.1f} mA RMS, tolerance {doc['tolerance_a'] * 1000:.1f} mA")
    return out, failing


def run_fit(
    model_path: Path,
    log_paths: list[Path],
    *,
    target: Path | None,
    as_json: bool,
    rig: str | None,
    accept_other_model: bool = False,
    held_spread: float | None = None,
) -> None:
    """Fit, report, and write `target` when given (nothing is written otherwise); `held_spread`: the
    held values' assumed error, a fraction (identify.HELD_SPREAD when None)."""
    v = model.load(model_path)
    if target is not None:
        outputs.check_target(target)
    text = _model_text(model_path)
    logs = checked_logs(v, log_paths, rig=rig, accept_other_model=accept_other_model)
    spread = identify.HELD_SPREAD if held_spread is None else held_spread
    result = identify.fit(v, logs, held_spread=spread)
    changes = identify.model_changes(result)
    new_text, fitted = _edited(text, changes, target or model_path)
    (before, _), (after, failing) = _phase_rms(v, logs), _phase_rms(fitted, logs)
    doc = _document(result, changes, logs, before=before, after=after, target=target, units_of=_units(text))
    doc["compare_fails_after"] = failing
    doc["held_spread"] = spread
    doc["written_envelope_problems"] = envelope.problems(fitted)
    doc["written_gate_problems"] = gate_problems(fitted) if changes else []
    for e in doc["estimates"]:
        e["note"] = _note(e, doc)
    doc["current_noise_a"] = {
        "logs": result.noise_a,
        "campaign_default": campaign.NOISE_OF_LIMIT * v.drive.current_limit_a,
    }
    if target is not None:
        outputs.write_file(target, new_text)
    click.echo(json.dumps(doc, indent=2) if as_json else _tables(doc))


def _model_text(model_path: Path) -> str:
    try:
        return model_path.read_text(encoding="utf-8")
    except OSError as exc:
        raise UserError(f"{model_path}: cannot read ({exc.strerror})") from None


def _edited(text: str, changes: dict[str, float], source: Path) -> tuple[str, Any]:
    """The model text with the fitted values and the vehicle it describes; a model the loader refuses is
    kinetab's own mistake (exit 3, nothing written)."""
    try:
        return model_edit.edited_text(text, changes, str(source))
    except ModelError as exc:
        raise InternalError(
            f"kinetab: internal error: the fit produced a model the loader refuses ({exc.key}: expected "
            f"{exc.expected}, found {exc.found}); nothing was written; please report this with the logs"
        ) from None


def run_lift_fit(model_path: Path, paths: list[Path], *, target: Path | None, as_json: bool, accept: bool) -> None:
    """bench fit of lift logs: report, and write the fitted lift keys to `target` when given."""
    from kinetab.generator import lift

    from . import liftcompare, liftfit, liftlog

    v = model.load(model_path)
    if v.lift is None:
        raise UserError(f"{paths[0]}: a lift log, but {model_path} has no [lift] section")
    if target is not None:
        outputs.check_target(target)
    text = _model_text(model_path)
    logs = checked_logs(v, paths, rig=None, accept_other_model=accept, read=liftlog.read_log)
    result = liftfit.fit(v, logs)
    new_text, fitted = _edited(text, result.changes(), target or model_path)
    failing = [str(log.path) for log in logs if not liftcompare.compare(fitted, log)["passed"]]
    report = lift.analyse(fitted)
    problems = report.problems if report is not None else []
    if target is not None:
        outputs.write_file(target, new_text)
    if as_json:
        click.echo(json.dumps(_lift_document(result, target, failing=failing, problems=problems), indent=2))
        return
    click.echo(liftfit.text(result))
    for path in failing:
        click.echo(f"warning: {path}: the fitted lift model still fails bench compare on this log", err=True)
    for problem in problems:
        click.echo(f"warning: the fitted model's lift is beyond its limits: {problem} (build refuses it)", err=True)
    click.echo(
        f"wrote {target}" if target else "nothing written (--write NEW.toml or --in-place writes the fitted keys)"
    )


def _lift_document(result: Any, target: Path | None, *, failing: list[str], problems: list[str]) -> dict[str, Any]:
    """bench fit --json for lift logs (SI units)."""
    import dataclasses

    return {
        "axis": "lift",
        "rows": result.rows,
        "rms_before_a": result.rms_before_a,
        "rms_after_a": result.rms_after_a,
        "estimates": [
            {**dataclasses.asdict(e), "key": e.key, "written": bool(target and not e.held)} for e in result.estimates
        ],
        "compare_fails_after": failing,
        "written_envelope_problems": problems,
        "written": str(target) if target else None,
    }


def _units(text: str) -> dict[str, tuple[str, float]]:
    """For each model key in UNIT_KEY, the unit the user wrote and its size in SI ("mm/s", 0.001)."""
    import tomllib

    try:
        doc = tomllib.loads(text.removeprefix("\ufeff"))
    except tomllib.TOMLDecodeError:
        return {}
    out = {}
    for key in set(UNIT_KEY.values()):
        section, name = key.split(".")
        raw = doc.get(section, {}).get(name)
        spec = model.SCHEMA[section][name]
        if isinstance(raw, str) and spec.kind not in (model.RATIO, model.COUNT):
            unit = raw.strip().lstrip("+-0123456789.eE ").strip()
            try:
                out[key] = (unit, units.parse(f"1 {unit}", spec.kind)) if unit else None
            except ValueError:
                continue
    return {k: u for k, u in out.items() if u}


def _shown(name: str, units_of: dict[str, tuple[str, float]]) -> tuple[str, float]:
    """(unit text, SI per unit) to show a fit quantity in."""
    key = UNIT_KEY.get(name)
    if key and key in units_of:
        return units_of[key]
    s = fp.SHOWN[name]
    return s.unit, 1.0 / s.factor


def _document(
    result: identify.Fit,
    changes: dict[str, float],
    logs: list[benchdata.BenchLog],
    *,
    before: Any,
    after: Any,
    target: Path | None,
    units_of: dict[str, tuple[str, float]],
) -> dict[str, Any]:
    present = [_kind(log) for log in logs]
    estimates = []
    for name, e in result.estimates.items():
        unit, per = _shown(name, units_of)
        estimates.append(
            {
                "parameter": name,
                "unit": unit,
                "model": e.model / per,
                "estimate": e.estimate / per,
                "standard_error": e.se / per,
                "si": {"model": e.model, "estimate": e.estimate, "standard_error": e.se},
                "on_bound": e.at_bound,
                "written": name in identify.written_names(result)
                or (name in identify.DERIVED_FROM and name in changes),  # a derived key the file gets
                "imprecise": result.imprecise.get(name),
                "measured_relative_error": result.measured_rel.get(name),
            }
        )
    return {
        "written": str(target) if target is not None else None,
        "estimates": estimates,
        "held": _held_docs(result, present),
        "condition_number": result.condition,
        "rms_force_n": {"before": result.rms_before_n, "after": result.rms_after_n},
        "data": result.how,
        "model_changes": changes,
        "kept_breakaway_n": identify.kept_breakaway(result),
        "refit_held": list(result.refit_held),
        "written_envelope_problems": [],
        "written_gate_problems": [],
        "compare_rms_a": {"before": before, "after": after},
    }


def _kind(log: benchdata.BenchLog) -> campaign.Candidate:
    s = log.setpoint
    return campaign.Candidate(log.rig, float(np.median(s["payload_kg"])), float(np.median(s["pitch_rad"])))


def _held_docs(result: identify.Fit, present: list[campaign.Candidate]) -> list[dict[str, Any]]:
    """Each held group with why, what the logs determine of it, and the further logs that would separate it."""
    if not result.held:
        return []
    have = [
        c
        for c in campaign.candidates(result.vehicle)
        if any(campaign.matches(c, p.rig, p.payload_kg, p.pitch_rad) for p in present)
    ]
    info = campaign.informations(result.vehicle, have, noise_a=result.noise_a)
    return [
        _held_doc(h, campaign.separating(result.gram, result.omega, members=g.members, info=info))
        for h, g in zip(result.held, result.groups)
    ]


def _held_doc(h: identify.Held, helps: list[campaign.Candidate]) -> dict[str, Any]:
    why = h.why
    if why == "scale":
        why = "only a known force (a payload) fixes how current becomes force"
        if "backdrive" in h.names[0]:
            why += ", and only while the wheels drive the motors (braking, downhill)"
    return {
        "parameters": list(h.names),
        "why": why,
        "determined": [
            {
                "combination": " ".join(f"{c:+.6g} x {n}" for c, n in comb.terms).lstrip("+"),
                "model_si": comb.model,
                "estimate_si": comb.estimate,
                "standard_error_si": comb.se,
            }
            for comb in h.combinations
        ],
        "separated_by": [c.label() for c in helps],
    }


NOT_KEYS = {
    "body.yaw_inertia": "the body's yaw inertia, written as body.gyration_radius",
    "reflected_inertia": "the rotating parts as one mass at the rim, written as drive.rotor_inertia",
    "friction.breakaway_excess": "friction.breakaway less friction.coulomb",
    "drive.backdrive_factor": "1 / drive.backdrive_efficiency",
}
"""Fit coordinates that are not model keys, and what they stand for (identify.WRITTEN maps the writes)."""


def _legend(doc: dict[str, Any]) -> list[str]:
    """What each fit coordinate in the report that is not a model key stands for."""
    shown = {e["parameter"] for e in doc["estimates"]} | {p for h in doc["held"] for p in h["parameters"]}
    return [f"{name}: {meaning}" for name, meaning in NOT_KEYS.items() if name in shown]


def _noise_hint(doc: dict[str, Any]) -> list[str]:
    """Where something is held and the logs are noisier than `bench campaign` plans for by default: how
    to plan runs that separate more."""
    noise = doc["current_noise_a"]
    if not doc["held"] or noise["logs"] <= noise["campaign_default"]:
        return []
    found, planned = noise["logs"] * 1000, noise["campaign_default"] * 1000
    return [
        f"the logs' current noise ({found:.3g} mA) is above what `bench campaign` plans for by default "
        f"({planned:.3g} mA): plan again with `bench campaign --noise '{found:.3g} mA'` for runs that separate more"
    ]


def _fmt(x: float) -> str:
    return f"{x:.6g}"


def _note(e: dict[str, Any], doc: dict[str, Any]) -> str:
    """The note column of one estimate: written (or to write), derived, reported, or why not written."""
    note = (
        ("written" if doc["written"] else "to write (--write or --in-place)")
        if e["written"]
        else "derived"
        if e["parameter"] in identify.DERIVED_FROM
        else "reported"
    )
    if e["written"] and e["parameter"] in identify.DERIVED_FROM:
        note += " (derived)"
    rel, total = e["measured_relative_error"], e["standard_error"] / max(abs(e["estimate"]), 1e-300)
    if e["written"] and rel is not None and total > identifiability.REL_TOL:
        note += (
            f"; rests on the held values: the logs give it to +-{100 * rel:.2g} %, +-{100 * total:.2g} % with what "
            f"they may be off by (+-{100 * doc['held_spread']:.3g} % each, --held-spread)"
        )
    if e["written"] and doc.get("refit_held"):
        note += "; value of a refit with the unwritten ones at the model's values (its move counted in +-)"
    kept = doc.get("kept_breakaway_n")
    if e["parameter"] == "friction.breakaway" and kept is not None:
        return (
            f"written as the new Coulomb force, {_fmt(kept)} N: the excess over it is not known from these logs "
            "(the estimate adds the joint fit's)"
            if e["written"]
            else "not written: the model's breakaway stays, its excess over Coulomb not known from these logs"
        )
    if e["imprecise"] is not None and rel is not None and rel <= identifiability.REL_TOL:
        note = (
            f"not written: the logs give it to +-{100 * rel:.2g} %, but holding the unwritten ones at the "
            f"model's values moves it: +-{100 * e['imprecise']:.2g} % together, over {REL_PERCENT} %"
        )
    elif e["imprecise"] is not None:
        note = f"not written: known only to +-{100 * e['imprecise']:.2g} % (1 sigma), over {REL_PERCENT} %"
    elif e["parameter"] == "friction.stribeck_speed" and not e["written"]:
        note = "not written: the decay of the breakaway excess, which these logs do not give"
    if e["on_bound"]:
        bound = f"ON ITS BOUND ({e['on_bound']}): not excited, or the model lacks a term"
        note = bound if e["written"] else f"{bound}; {note}"
    return note


def gate_problems(fitted: Any) -> list[str]:
    """The checks of `kinetab verify` the written model would fail on its own (error budget, current step
    between neighbouring inputs), as lines: a trial's fitted file built and then failed the CI gate."""
    from kinetab.generator import steps, synthesis
    from kinetab.generator.errors import CheckFailed

    try:
        fw = synthesis.synthesise(fitted)
    except CheckFailed as exc:
        return [str(exc)]
    checks = [gate.budget_check(fw), gate.step_check(fw, steps.neighbour_steps(fw))]
    return [f"{c.name}: {c.detail}" for c in checks if not c.ok]


def _after_lines(doc: dict[str, Any]) -> list[str]:
    """What the written model still gets wrong: an infeasible envelope, a failing CI gate, logs it still
    fails compare on."""
    lines = [
        f"warning: the written model would fail `kinetab verify`: {problem}" for problem in doc["written_gate_problems"]
    ]
    if doc["written_envelope_problems"]:
        lines.append(
            f"warning: the fitted model's envelope is infeasible ({doc['written_envelope_problems'][0]}): build "
            f"refuses it unless {gate.ALLOW_OPTION}; the drive's limits or the envelope need a look"
        )
    before, after = doc["compare_rms_a"]["before"], doc["compare_rms_a"]["after"]
    worse = [name for name in after if after[name]["all"] > 1.02 * before[name]["all"]]
    for name in worse:
        lines.append(
            f"warning: the written model fits {name} worse than the model did (compare RMS "
            f"{before[name]['all'] * 1000:.1f} -> {after[name]['all'] * 1000:.1f} mA); check before writing it in place"
        )
    if doc["compare_fails_after"]:
        lines.append(
            "the written model still fails compare on: "
            + "; ".join(doc["compare_fails_after"])
            + " (what is held or not written above may be why; more or longer logs may tell it)"
        )
    return lines


def _tables(doc: dict[str, Any]) -> str:
    lines = [f"{'parameter':30}{'unit':>8}{'model':>12}{'estimate':>12}{'+-2 sigma':>12}  note"]
    for e in doc["estimates"]:
        lines.append(
            f"{e['parameter']:30}{e['unit']:>8}{_fmt(e['model']):>12}{_fmt(e['estimate']):>12}"
            f"{_fmt(2 * e['standard_error']):>12}  {_note(e, doc)}"
        )
    for h in doc["held"]:
        lines.append(f"held at the model's values: {', '.join(h['parameters'])}: {h['why']}")
        for d in h["determined"]:
            lines.append(
                f"    the logs determine {d['combination']} = {_fmt(d['estimate_si'])} +- "
                f"{_fmt(2 * d['standard_error_si'])} (SI; model {_fmt(d['model_si'])})"
            )
        if h["separated_by"]:
            lines.append(f"    to separate it, add a log {' and a log '.join(h['separated_by'])}")
        else:
            lines.append("    no one or two further logs of the kinds `bench campaign` plans would separate it")
    lines += _noise_hint(doc)
    lines.append(
        f"+-2 sigma: HAC standard errors (residuals correlated in time); condition number "
        f"{doc['condition_number']:.3g}; rim-force RMS residual {doc['rms_force_n']['before']:.4g} N -> "
        f"{doc['rms_force_n']['after']:.4g} N"
    )
    lines += [f"data: {a}" for a in doc["data"]]
    lines.append("compare RMS [mA] before -> after:")
    for log, phases in doc["compare_rms_a"]["before"].items():
        after = doc["compare_rms_a"]["after"][log]
        lines.append(
            f"  {log}: " + ", ".join(f"{p} {b * 1000:.1f} -> {after[p] * 1000:.1f}" for p, b in phases.items())
        )
    lines += _after_lines(doc)
    lines += _legend(doc)
    kept = doc["kept_breakaway_n"]
    if kept is not None:
        how = "raised to the new Coulomb force" if "friction.breakaway" in doc["model_changes"] else "kept"
        lines.append(f"friction.breakaway {how}: {_fmt(kept)} N (its excess over Coulomb is not known from these logs)")
    if "drive.rotor_inertia" in doc["model_changes"]:
        lines.append("reflected_inertia is written as drive.rotor_inertia (wheels.inertia kept: the split is not seen)")
    if doc["written"]:
        lines.append(f"wrote {doc['written']}")
    else:
        lines.append("dry run: nothing written (--write NEW.toml or --in-place to write the fitted values)")
    return "\n".join(lines)
