"""`kinetab report`: the set is written at once (an interrupted report leaves the old one), progress shows
only on a terminal, and every plot carries the model's name, labelled axes and the limits it is about.
Expectations come from the model file itself (its name, its pitch_max and accel_max, its table
breakpoints), not from the plotting code."""

from __future__ import annotations

import signal

import numpy as np
import pytest
from kinetab.generator import cli_support, envelope, outputs, plots

from tests import helpers
from tests.helpers import write_model


@pytest.fixture(scope="module")
def invented(tmp_path_factory):
    """A random vehicle (helpers.invented, seeded) with its model file."""
    doc, fw = helpers.invented(1602, "quillon")
    return write_model(tmp_path_factory.mktemp("quillon"), doc, "quillon.toml"), fw


@pytest.mark.slow  # renders most of a report (5 s)
def test_interrupted_report_leaves_the_old_set(invented, tmp_path, capsys, monkeypatch):
    """Regression: Ctrl-C while `report` drew left 8 new PNGs beside the old index.html (exit 130)."""
    import kinetab

    path, _ = invented
    out = tmp_path / "rep"
    out.mkdir()
    (out / "index.html").write_text("old\n")
    monkeypatch.setattr(plots, "error_plot", lambda *a, **k: signal.raise_signal(signal.SIGINT))
    with pytest.raises(SystemExit) as stop:
        kinetab.main(["report", str(path), "-o", str(out)])
    assert stop.value.code == 130
    assert sorted(p.name for p in out.iterdir()) == ["index.html"]
    assert (out / "index.html").read_text() == "old\n"


def test_ctrl_c_among_the_renames_is_held_until_the_set_is_whole(tmp_path, monkeypatch):
    """A SIGINT arriving between two renames of write_set is delivered after the last one."""
    files = {tmp_path / f"f{k}.txt": f"new {k}\n" for k in range(4)}
    for p in files:
        p.write_text("old\n")
    real_replace, seen = outputs.os.replace, []

    def replace_then_interrupt(src, dst):
        real_replace(src, dst)
        if not seen:
            seen.append(dst)
            signal.raise_signal(signal.SIGINT)

    monkeypatch.setattr(outputs.os, "replace", replace_then_interrupt)
    previous = signal.signal(signal.SIGINT, cli_support._raise_interrupted)
    try:
        with pytest.raises(cli_support.Interrupted):
            outputs.write_set(files)
    finally:
        signal.signal(signal.SIGINT, previous)
    assert seen and all(p.read_text() == text for p, text in files.items())


@pytest.mark.slow  # renders a whole report (8 s)
def test_report_writes_the_whole_set_and_no_progress_off_a_terminal(invented, tmp_path, capsys):
    """Through the command line: one PNG per table plus error and envelope, index.html showing each of
    them; stderr not a terminal (pytest's capture), so no progress line, and stdout one result line.
    On a terminal the line is redrawn in place and erased at the end."""
    import kinetab

    path, fw = invented
    kinetab.main(["report", str(path), "-o", str(tmp_path)])
    out, err = capsys.readouterr()
    assert "\r" not in err and "report:" not in err  # (the invented vehicle may get envelope warnings)
    assert out.startswith(f"wrote {len(fw.tables) + 3} files") and len(out.splitlines()) == 1
    pngs = {f"table_{n}.png" for n in fw.tables} | {"error.png", "envelope.png"}
    assert {p.name for p in tmp_path.iterdir()} == pngs | {"index.html"}
    page = (tmp_path / "index.html").read_text()
    assert all(f'src="{n}"' in page for n in pngs)
    assert all((tmp_path / n).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" for n in pngs)  # PNG signature (PNG spec)
    shown = cli_support.ProgressLine("report", enabled=True)
    shown("table m11 (1 of 2)")
    shown("error")
    shown.clear()
    err = capsys.readouterr().err
    assert err.startswith("\rreport: table m11 (1 of 2) ...") and err.endswith("\r") and "\n" not in err


@pytest.fixture
def figures(monkeypatch):
    """Every figure the plots module renders, kept instead of turned into PNG bytes."""
    kept = []
    monkeypatch.setattr(plots, "_png", lambda fig: kept.append(fig) or b"png")
    return kept


def _labelled(fig) -> None:
    for ax in fig.axes:
        assert ax.get_xlabel().endswith("]") and ax.get_ylabel(), (ax.get_title(), ax.get_xlabel(), ax.get_ylabel())
        assert ax.get_ylabel().endswith("]") or "(log scale)" in ax.get_ylabel()


def test_table_plots_name_the_model_and_mark_every_breakpoint(invented, figures):
    """Each table plot: the model's name in the title, x and y labelled with quantity and unit, and a dot
    at every breakpoint inside the input range plus the range ends (a one-segment table has two)."""
    _, fw = invented
    for name, table in fw.tables.items():
        plots.table_plot(fw, name)
        fig = figures.pop()
        assert fig._suptitle.get_text().startswith(f"quillon: table {name}")
        _labelled(fig)
        dots = next(line for line in fig.axes[0].get_lines() if line.get_label() == "breakpoints")
        spec = table.spec
        expected = set()
        for piece, done in zip(spec.pieces, table.pieces):
            xs = piece.x0 + (np.arange(done.segments + 1) << done.shift)
            expected |= set(xs[xs <= piece.x1].tolist()) | ({piece.x1} if done.segments else set())
        if spec.symmetry != "none":
            expected |= {-x for x in expected}
        assert len(dots.get_xdata()) == len(expected), name


def test_error_and_envelope_plots_show_their_limits(invented, figures):
    """error.png: model name and the number of points in the title, budget and bound drawn. envelope.png:
    model name in the title, pitch_max and accel_max drawn as lines at the model file's values."""
    _, fw = invented
    v = fw.vehicle
    plots.error_plot(fw, 500)
    fig = figures.pop()
    title = fig.axes[0].get_title()
    assert title.startswith("quillon:") and "points inside the envelope" in title
    _labelled(fig)
    plots.envelope_plot(v, envelope.analyse(v))
    fig = figures.pop()
    assert fig._suptitle.get_text().startswith("quillon: envelope")
    _labelled(fig)
    pitch, accel = fig.axes
    drawn = {line.get_label(): line.get_ydata()[0] for ax in fig.axes for line in ax.get_lines()}
    assert drawn["envelope.pitch_max"] == pytest.approx(np.degrees(v.envelope.pitch_max_rad))
    assert drawn["envelope.accel_max"] == pytest.approx(v.envelope.accel_max_mps2)
    assert len(pitch.get_lines()[0].get_xdata()) >= 20
