"""Audio devices as sounddevice numbers and names them, and clear errors when they fail.

sounddevice (PortAudio) is imported here only when a function needs it: importing it fails
when the PortAudio library is missing, and PortAudio looks for audio servers at import, so
it should be imported after the server (e.g. JACK) is running.

Every failure a user can fix becomes one :class:`~filtertwin.errors.UserInputError` line:
the PortAudio library missing, no devices (no audio server), a device that does not exist,
or a rate or channel count the device cannot do.
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass
from types import ModuleType
from typing import Literal

from filtertwin.errors import UserInputError

Direction = Literal["output", "input", "duplex"]

NO_DEVICES_HINT = (
    "no audio devices found: start an audio server (JACK, PipeWire or PulseAudio; with no "
    "sound card, 'jackd -d dummy -r 48000' gives one) or connect a sound card, then try again"
)
MISSING_LIBRARY_HINT = (
    "the PortAudio library is missing: install Debian's libportaudio2 "
    "(apt-get install libportaudio2) or your system's PortAudio package"
)


@dataclass(frozen=True)
class Device:
    """An audio device as PortAudio reports it (``index`` is sounddevice's number)."""

    index: int
    name: str
    host_api: str
    input_channels: int
    output_channels: int
    default_rate_hz: float

    def describe(self) -> str:
        """One line: number, name, host API, channels and default rate."""
        return (
            f"{self.index} '{self.name}' ({self.host_api}, {self.input_channels} in, "
            f"{self.output_channels} out, {self.default_rate_hz:g} Hz)"
        )


def load_sounddevice() -> ModuleType:
    """Import sounddevice, or say how to install the missing PortAudio library.

    Raises
    ------
    UserInputError
        If the PortAudio library cannot be loaded.
    """
    try:
        return importlib.import_module("sounddevice")
    except OSError as error:
        raise UserInputError(f"{MISSING_LIBRARY_HINT} ({error})") from None


def audio_error(error: Exception, device: Device | None = None) -> UserInputError:
    """Turn a PortAudio error into a one-line UserInputError."""
    message = " ".join(str(arg) for arg in error.args[:1]) or type(error).__name__
    if "Error querying device -1" in message:
        return UserInputError(NO_DEVICES_HINT)
    where = f" on device {device.describe()}" if device is not None else ""
    return UserInputError(f"audio error{where}: {message}")


def list_devices(sd: ModuleType | None = None) -> tuple[Device, ...]:
    """All devices PortAudio sees, in sounddevice's numbering.

    Raises
    ------
    UserInputError
        If the PortAudio library is missing.
    """
    sd = load_sounddevice() if sd is None else sd
    host_apis = [api["name"] for api in sd.query_hostapis()]
    return tuple(
        Device(
            index=int(info["index"]),
            name=str(info["name"]),
            host_api=host_apis[int(info["hostapi"])],
            input_channels=int(info["max_input_channels"]),
            output_channels=int(info["max_output_channels"]),
            default_rate_hz=float(info["default_samplerate"]),
        )
        for info in sd.query_devices()
    )


def format_devices(
    devices: tuple[Device, ...], default_input: int = -1, default_output: int = -1
) -> str:
    """A table of the devices, one per line, the default ones marked (or the hint when
    there are none)."""
    if not devices:
        return NO_DEVICES_HINT
    defaults = (("default input", default_input), ("default output", default_output))
    lines = []
    for device in devices:
        marks = ", ".join(name for name, index in defaults if index == device.index)
        lines.append(f"  {device.describe()}" + (f"  <- {marks}" if marks else ""))
    return "\n".join(lines)


def _channels(device: Device, direction: Direction) -> int:
    if direction == "output":
        return device.output_channels
    if direction == "input":
        return device.input_channels
    return min(device.input_channels, device.output_channels)


def choose_device(
    devices: tuple[Device, ...],
    wanted: int | str | None,
    direction: Direction = "output",
    default_index: int = -1,
) -> Device:
    """Pick a device by number, by (part of) its name, or the default one.

    Parameters
    ----------
    devices : tuple of Device
        From :func:`list_devices`.
    wanted : int, str or None
        A device number, a digit string, a name or part of one (case does not matter; an
        exact name wins over partial matches), or None for ``default_index``.
    direction : {"output", "input", "duplex"}
        What the device must be able to do.
    default_index : int
        The default device's number (-1: none).

    Returns
    -------
    Device

    Raises
    ------
    UserInputError
        If there are no devices, nothing matches, several names match, or the device has no
        channels in the needed direction; the message lists the candidates.
    """
    if not devices:
        raise UserInputError(NO_DEVICES_HINT)
    listing = "; ".join(device.describe() for device in devices)
    if wanted is None:
        matches = [d for d in devices if d.index == default_index]
        if not matches:
            raise UserInputError(
                f"there is no default {direction} device; choose one of: {listing}"
            )
    elif isinstance(wanted, int) or wanted.strip().isdigit():
        matches = [d for d in devices if d.index == int(wanted)]
        if not matches:
            raise UserInputError(f"there is no audio device number {wanted}; devices: {listing}")
    else:
        text = wanted.strip().lower()
        matches = [d for d in devices if d.name.lower() == text]
        matches = matches or [d for d in devices if text in d.name.lower()]
        if not matches:
            raise UserInputError(f"no audio device name contains {wanted!r}; devices: {listing}")
        if len(matches) > 1:
            found = "; ".join(d.describe() for d in matches)
            raise UserInputError(
                f"{len(matches)} audio devices match {wanted!r}: {found}; "
                "give the device number or more of its name"
            )
    device = matches[0]
    if _channels(device, direction) == 0:
        raise UserInputError(f"device {device.describe()} has no {direction} channels")
    return device


def check_settings(
    device: Device,
    rate_hz: float,
    channels: int,
    direction: Direction = "output",
    sd: ModuleType | None = None,
) -> None:
    """Check with PortAudio that the device can stream float32 at this rate and channels.

    Raises
    ------
    UserInputError
        Naming the device, the setting it cannot do, and what it can.
    """
    sd = load_sounddevice() if sd is None else sd
    if channels > _channels(device, direction):
        raise UserInputError(
            f"device {device.describe()} has {_channels(device, direction)} {direction} "
            f"channels, {channels} asked for; use fewer channels or another device"
        )
    checks = []
    if direction in ("output", "duplex"):
        checks.append(sd.check_output_settings)
    if direction in ("input", "duplex"):
        checks.append(sd.check_input_settings)
    for check in checks:
        try:
            check(device=device.index, samplerate=rate_hz, channels=channels, dtype="float32")
        except sd.PortAudioError as error:
            if "sample rate" in str(error).lower():
                raise UserInputError(
                    f"device {device.describe()} cannot run at {rate_hz:g} Hz; "
                    f"use --rate {device.default_rate_hz:g} or leave --rate out (a recording at "
                    "another rate is resampled as it plays)"
                ) from None
            raise audio_error(error, device) from None


def find_device(
    wanted: int | str | None, direction: Direction = "output", sd: ModuleType | None = None
) -> Device:
    """:func:`choose_device` among the devices PortAudio sees now, with its default device."""
    sd = load_sounddevice() if sd is None else sd
    defaults = sd.default.device
    default_index = int(defaults[1] if direction != "input" else defaults[0])
    return choose_device(list_devices(sd), wanted, direction, default_index)
