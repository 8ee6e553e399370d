"""Command-line plumbing both command groups share: the quantity option type, a group whose
subcommands load on first use, and the one mapping from errors to exit codes (0 ok, 1 check
failed, 2 bad input or usage, 130 interrupted)."""

from __future__ import annotations

import importlib
import signal
import sys
import threading
from pathlib import Path
from typing import Any

import click

from . import units
from .errors import CheckFailed, InternalError, UserError


class QuantityType(click.ParamType):
    """A click option value: any pint quantity of one kind; a bare number is in `bare_unit`."""

    name = "quantity"

    def __init__(self, kind: units.Kind, bare_unit: str, *, least: float | None = None, above: bool = False) -> None:
        """`least`: the smallest value allowed (exclusive with `above`), in SI; None: any."""
        self.kind, self.bare_unit, self.least, self.above = kind, bare_unit, least, above

    def convert(self, value: Any, param: click.Parameter | None, ctx: click.Context | None) -> float:
        if isinstance(value, float):
            return value
        text = str(value).strip()
        try:
            float(text)
            text = f"{text} {self.bare_unit}"
        except ValueError:
            pass
        try:
            result = units.parse(text, self.kind)
        except ValueError:
            self.fail(f"expected {self.kind.name} such as {self.kind.example}, found {value!r}", param, ctx)
        if self.least is not None and (result < self.least or (self.above and result == self.least)):
            word = "above" if self.above else "at least"
            self.fail(f"expected {self.kind.name} {word} {self.least:g} {self.kind.si}, found {value!r}", param, ctx)
        return result


class LazyGroup(click.Group):
    """A click group whose registered subgroups are imported only when named on the command line,
    so `kinetab build` never imports the bench side (and the bench side can live in its own package)."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self.lazy: dict[str, tuple[str, str, str]] = {}

    def add_lazy(self, name: str, module: str, attr: str, short_help: str) -> None:
        """Register `name` as `module.attr`, imported on first use; `short_help` shows in the list."""
        self.lazy[name] = (module, attr, short_help)

    def list_commands(self, ctx: click.Context) -> list[str]:
        return sorted([*super().list_commands(ctx), *self.lazy])

    def get_command(self, ctx: click.Context, cmd_name: str) -> click.Command | None:
        if cmd_name in self.lazy and cmd_name not in self.commands:
            module, attr, _ = self.lazy[cmd_name]
            command = getattr(importlib.import_module(module), attr)
            self.add_command(command, cmd_name)
        return super().get_command(ctx, cmd_name)

    def format_commands(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        """The command list without importing lazy groups: their short help is registered with them."""
        rows = []
        for name in self.list_commands(ctx):
            if name in self.lazy and name not in self.commands:
                rows.append((name, self.lazy[name][2]))
                continue
            cmd = self.commands.get(name)
            if cmd is not None and not cmd.hidden:
                rows.append((name, cmd.get_short_help_str(limit=200)))
        if rows:
            with formatter.section("Commands"):
                formatter.write_dl(rows)


def run(group: click.Group, argv: list[str] | None) -> None:
    """Run a click group with the project's exit codes: returns on success; user mistakes print one
    line (exit 2), failed checks exit 1, kinetab's own mistakes exit 3, Ctrl-C exits 130. With the
    group's `--debug` option a user error shows its traceback instead."""
    args = list(sys.argv[1:] if argv is None else argv)
    debug = "--debug" in args[: _first_command(group, args)]
    main_thread = threading.current_thread() is threading.main_thread()  # only it may set handlers
    previous = {s: signal.signal(s, _raise_interrupted) for s in (signal.SIGINT, signal.SIGTERM)} if main_thread else {}
    try:
        _invoke(group, args, debug)
    except Interrupted as exc:
        click.echo("kinetab: interrupted" if exc.signum == signal.SIGINT else "kinetab: terminated", err=True)
        sys.exit(128 + exc.signum)
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)


def out_folder(text: str) -> Path:
    """The -o/--out folder; an empty name is a user error (a blank in a script's variable)."""
    if not text.strip():
        raise UserError("-o/--out: expected an output folder, found an empty name (use '.' for this folder)")
    return Path(text)


class ProgressLine:
    """What long work is doing, on one line of stderr redrawn in place; only on a terminal (a log file or
    a pipe gets nothing, and neither does a command asked for JSON). Cleared before the result prints."""

    def __init__(self, prefix: str, *, enabled: bool | None = None) -> None:
        self.prefix = prefix
        self.enabled = sys.stderr.isatty() if enabled is None else enabled
        self.width = 0

    def __call__(self, text: str) -> None:
        if self.enabled:
            line = f"{self.prefix}: {text} ..."
            click.echo("\r" + line.ljust(self.width), nl=False, err=True)
            self.width = len(line)

    def clear(self) -> None:
        """Erase the line (nothing if none was shown)."""
        if self.enabled and self.width:
            click.echo("\r" + " " * self.width + "\r", nl=False, err=True)
            self.width = 0


class Interrupted(BaseException):
    """Ctrl-C (SIGINT) or SIGTERM during a command. Not a KeyboardInterrupt, which click would turn into
    its own abort message; `finally` blocks still run, so temporary files are removed and a bench run
    halts the motors."""

    def __init__(self, signum: int) -> None:
        super().__init__(signum)
        self.signum = signum


def _raise_interrupted(signum: int, _frame: object) -> None:
    """The first Ctrl-C or SIGTERM stops the command; later ones are ignored, so they cannot cut short
    the cleanup the first one started (halting the motors, stopping an emulator)."""
    for sig in (signal.SIGINT, signal.SIGTERM):
        signal.signal(sig, signal.SIG_IGN)
    raise Interrupted(signum)


def _first_command(group: click.Group, args: list[str]) -> int:
    """Index of the subcommand name in args (top-level options such as --debug come before it)."""
    for k, arg in enumerate(args):
        if not arg.startswith("-"):
            return k
    return len(args)


def _invoke(group: click.Group, args: list[str], debug: bool) -> None:
    """One call of the group; every expected exception becomes its exit code (a SystemExit)."""
    if not args:  # plain help, as `--help` prints it
        with group.make_context("kinetab", ["--help"], resilient_parsing=True) as ctx:
            click.echo(ctx.get_help())
        return
    try:
        code = group.main(args=args, prog_name="kinetab", standalone_mode=False)
    except click.exceptions.Exit as exc:
        sys.exit(exc.exit_code)
    except click.exceptions.Abort:
        click.echo("kinetab: aborted", err=True)
        sys.exit(130)
    except click.UsageError as exc:
        where = exc.ctx.command_path if exc.ctx else "kinetab"  # "kinetab bench simulate", not "kinetab simulate"
        click.echo(f"{where}: {exc.format_message()}".replace("\n", " "), err=True)
        sys.exit(2)
    except click.ClickException as exc:
        click.echo(f"kinetab: {exc.format_message()}", err=True)
        sys.exit(exc.exit_code)
    except (UserError, CheckFailed, InternalError) as exc:
        if debug:
            raise
        click.echo(str(exc), err=True)
        sys.exit(exc.exit_code)
    if isinstance(code, int) and code != 0:
        sys.exit(code)
