"""``bandcensus devices``: list the attached receivers and their tuner types.

Exit 0 whether or not a receiver is found (finding none is an answer, not a failure); exit 1
with one line when the receiver library itself cannot be loaded.
"""

from __future__ import annotations

import click

from bandcensus.commands._common import echo_json, json_option


@click.command("devices")
@json_option
def command(as_json):
    """List attached USB receivers: index, serial number, tuner type.

    Pass the serial (or the index) to 'bandcensus scan --device'. Exit 0 also when none is
    found; exit 1 when the receiver library cannot be loaded.
    """
    from survey.sources.rtl import list_devices

    devices = list_devices()
    if as_json:
        echo_json([{"index": d.index, "serial": d.serial, "name": d.name, "tuner": d.tuner} for d in devices])
        return
    if not devices:
        click.echo("No receiver found: plug it in, check that lsusb lists it, install the udev rule and "
                   "unload the kernel DVB driver (see the README, 'Setting up the receiver on Linux').")
        return
    for d in devices:
        tuner = d.tuner or "unknown (could not open: busy or no permission)"
        click.echo(f"{d.index}  serial {d.serial or '-'}  tuner {tuner}  {d.name}")
