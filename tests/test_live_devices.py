import subprocess
import sys

import pytest

from filtertwin.errors import UserInputError
from filtertwin.live.devices import (
    Device,
    audio_error,
    check_settings,
    choose_device,
    find_device,
    format_devices,
    list_devices,
)

JACK_API = "JACK Audio Connection Kit"
DEVICES = (
    Device(0, "system", JACK_API, 2, 2, 48000.0),
    Device(1, "PortAudio-01", JACK_API, 2, 2, 48000.0),
    Device(2, "USB headset: Audio (hw:1,0)", "ALSA", 1, 2, 44100.0),
    Device(3, "USB microphone", "ALSA", 2, 0, 44100.0),
)


def test_a_device_is_chosen_by_number_by_exact_name_or_by_part_of_its_name():
    assert choose_device(DEVICES, 2).name.startswith("USB")
    assert choose_device(DEVICES, " 1 ").name == "PortAudio-01"
    assert choose_device(DEVICES, "SYSTEM").index == 0
    assert choose_device(DEVICES, "headset").index == 2
    assert choose_device(DEVICES, None, default_index=2).index == 2


def test_an_unknown_device_name_lists_what_exists():
    with pytest.raises(
        UserInputError,
        match=r"no audio device name contains 'speakers'; devices: 0 'system' "
        r"\(JACK Audio Connection Kit, 2 in, 2 out, 48000 Hz\); 1 'PortAudio-01'",
    ):
        choose_device(DEVICES, "speakers")


def test_an_unknown_device_number_lists_what_exists():
    with pytest.raises(UserInputError, match=r"no audio device number 9; devices: 0 'system'"):
        choose_device(DEVICES, 9)


def test_a_name_matching_several_devices_asks_for_more():
    with pytest.raises(
        UserInputError, match=r"2 audio devices match 'usb': .*give the device number"
    ):
        choose_device(DEVICES, "usb")


def test_a_device_without_output_channels_is_refused_for_output():
    with pytest.raises(UserInputError, match=r"'USB microphone' .* has no output channels"):
        choose_device(DEVICES, "microphone")
    assert choose_device(DEVICES, "microphone", direction="input").index == 3


def test_no_devices_means_no_audio_server():
    with pytest.raises(UserInputError, match="no audio devices found: start an audio server"):
        choose_device((), "system")
    with pytest.raises(UserInputError, match="no default output device; choose one of: 0"):
        choose_device(DEVICES, None, default_index=-1)
    assert format_devices(()).startswith("no audio devices found")


def test_portaudio_error_querying_device_minus_1_becomes_the_no_server_hint():
    import sounddevice as sd

    error = audio_error(sd.PortAudioError("Error querying device -1"))
    assert str(error).startswith("no audio devices found: start an audio server")
    other = audio_error(sd.PortAudioError("Invalid number of channels", -9998), DEVICES[0])
    assert (
        str(other) == "audio error on device 0 'system' (JACK Audio Connection Kit, 2 in, "
        "2 out, 48000 Hz): Invalid number of channels"
    )


def test_a_missing_portaudio_library_says_to_install_libportaudio2():
    # sounddevice raises OSError at import when ctypes cannot find the library
    hide_library = (
        "import ctypes.util; ctypes.util.find_library = lambda name: None\n"
        "from filtertwin.live.devices import load_sounddevice\n"
        "from filtertwin.errors import UserInputError\n"
        "try:\n    load_sounddevice()\nexcept UserInputError as e:\n    print(e)\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", hide_library], capture_output=True, text=True, timeout=60
    )
    assert done.stdout.startswith(
        "the PortAudio library is missing: install Debian's libportaudio2"
    )
    assert len(done.stdout.strip().splitlines()) == 1


@pytest.mark.live
def test_the_jack_system_device_appears_on_the_jack_host_api(jack_server):
    devices = list_devices()
    system = [d for d in devices if d.name == "system"]
    assert len(system) == 1
    assert system[0].host_api == JACK_API
    # the dummy server runs with -r 48000 -C 2 -P 2 (tools/jack_server.sh)
    assert (system[0].input_channels, system[0].output_channels) == (2, 2)
    assert system[0].default_rate_hz == 48000.0
    assert find_device("system", "duplex") == system[0]
    check_settings(system[0], 48000.0, 2, "duplex")


@pytest.mark.live
def test_an_unknown_device_on_the_real_server_gives_the_clear_error(jack_server):
    with pytest.raises(
        UserInputError, match=r"no audio device name contains 'nosuch'; devices: .*'system' \(JACK"
    ):
        find_device("nosuch")


@pytest.mark.live
def test_a_rate_the_server_does_not_run_at_is_refused_with_the_rate_it_has(jack_server):
    system = find_device("system")
    with pytest.raises(
        UserInputError,
        match=r"'system' .* cannot run at 44100 Hz; use --rate 48000 or leave --rate out \(a "
        r"recording at another rate is resampled as it plays\)$",
    ):
        check_settings(system, 44100.0, 2)  # no advice to resample a file by hand
    with pytest.raises(UserInputError, match=r"has 2 output channels, 4 asked for"):
        check_settings(system, 48000.0, 4)
