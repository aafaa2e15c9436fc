"""`filtertwin devices`: the audio devices, numbered and named as sounddevice does."""

from __future__ import annotations

import argparse
from typing import Any

from filtertwin.errors import UserInputError


def register(subparsers: Any) -> None:
    """Add the ``devices`` sub-command."""
    p = subparsers.add_parser(
        "devices",
        help="list the audio devices (numbers and names for listen --device)",
        description=(
            "List the audio devices PortAudio sees, with the number and name that "
            "'filtertwin listen --device' takes, their channels and default rate."
        ),
    )
    p.set_defaults(func=cmd_devices)


def cmd_devices(args: argparse.Namespace) -> int:
    """Print the device table; exit 2 when PortAudio or every device is missing."""
    from filtertwin.live import devices

    sd = devices.load_sounddevice()
    found = devices.list_devices(sd)
    if not found:
        raise UserInputError(devices.NO_DEVICES_HINT)
    default_in, default_out = (int(i) for i in sd.default.device)
    print(devices.format_devices(found, default_in, default_out))
    print("\nchoose one with 'filtertwin listen ... --device NUMBER' or part of its name")
    return 0
