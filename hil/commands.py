"""The `kinetab bench` command group: thin click commands over the bench modules."""

from __future__ import annotations

import json

import click


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
def bench() -> None:
    """Bench link to the drive controller: serial ports."""


@bench.command(short_help="List serial ports with USB VID:PID, serial number and description.")
@click.option("--json", "as_json", is_flag=True, help="Print JSON instead of a table.")
def ports(as_json: bool) -> None:
    """List serial ports: device, USB VID:PID, serial number, description."""
    from . import portlist

    found = portlist.ports()
    if as_json:
        click.echo(json.dumps([p.as_dict() for p in found], indent=2))
        return
    click.echo(portlist.table(found))
