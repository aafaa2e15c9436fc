"""The preview window (`listen --window`) in a real browser, on real streams.

Debian's Chromium, driven by Playwright for Python, opens the page that the listen session
serves; the session plays on the JACK dummy server and a JACK client of this test records
what comes out (as in test_live_listen_stream.py). Clicks in the page must change what is
heard, and what the page shows must be what the design's own equations give.
"""

from __future__ import annotations

import json
import math
import re
import time
import urllib.error
import urllib.request
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pytest
from scipy import signal, stats

from filtertwin.circuit import eseries, sallenkey
from filtertwin.digital.render import render_array
from filtertwin.live.tap import SignalTap
from filtertwin.live.window import open_window
from test_live_listen_stream import (
    PREROLL,
    RATE_HZ,
    Recorder,
    player_for,
    signal_start,
    write_wav,
)

CHROMIUM = "/usr/bin/chromium"
pytestmark = pytest.mark.live
NAMES = ["candidate-butterworth", "candidate-bessel"]


@pytest.fixture(scope="module")
def browser():
    from playwright.sync_api import sync_playwright

    with sync_playwright() as pw:
        chromium = pw.chromium.launch(executable_path=CHROMIUM, args=["--no-sandbox"])
        try:
            yield chromium
        finally:
            chromium.close()


@contextmanager
def served(player, record_s: float = 0.0):
    """Open and start the player, record its output, serve its window (no browser)."""
    said: list[str] = []
    recorder = Recorder(int((record_s + 1.0) * RATE_HZ)) if record_s else None
    try:
        player.open()
        if recorder is not None:
            recorder.connect()
        player.start()
        with open_window(player, said.append, browser=False) as server:
            yield server, recorder, said
    finally:
        player.close()
        if recorder is not None:
            recorder.close()


def open_page(browser, server, size=(1500, 1000)):
    page = browser.new_page(viewport={"width": size[0], "height": size[1]})
    page.goto(server.url)
    page.wait_for_selector("[data-candidate], #blind:not([hidden])")
    return page


def noise_wav(tmp_path: Path, seconds: float, seed: int = 3) -> tuple[Path, np.ndarray]:
    rng = np.random.default_rng(seed)
    source = np.concatenate(
        [np.zeros((PREROLL, 2)), 0.1 * rng.standard_normal((int(seconds * RATE_HZ), 2))]
    ).astype(np.float32)
    return write_wav(tmp_path / "noise.wav", source), source


# --- security ------------------------------------------------------------------------------


def status_of(url: str, headers: dict | None = None) -> int:
    try:
        with urllib.request.urlopen(urllib.request.Request(url, headers=headers or {})) as r:
            return r.status
    except urllib.error.HTTPError as error:
        return error.code


def listening_addresses(port: int) -> list[str]:
    """Local addresses listening on ``port``, from the kernel's own table (/proc/net/tcp)."""
    found = []
    for table in ("/proc/net/tcp", "/proc/net/tcp6"):
        try:
            lines = Path(table).read_text().splitlines()[1:]
        except OSError:
            continue
        for line in lines:
            local, state = line.split()[1], line.split()[3]
            address, port_hex = local.rsplit(":", 1)
            if int(port_hex, 16) == port and state == "0A":  # 0A: LISTEN (Linux tcp_states.h)
                found.append(address)
    return found


def test_the_window_answers_only_with_its_token_and_only_on_loopback(tmp_path, jack_server):
    wav, _ = noise_wav(tmp_path, 0.5)
    player = player_for(NAMES, wav, [])
    with served(player) as (server, _, said):
        base = f"http://127.0.0.1:{server.port}/"
        assert server.url in said[0]
        assert status_of(server.url) == 200
        assert status_of(server.url + "app.js") == 200
        assert status_of(base) == 403  # no token
        assert status_of(base + "app.js") == 403
        wrong = server.token[:-1] + ("A" if server.token[-1] != "A" else "B")
        assert status_of(f"{base}{wrong}/") == 403  # a token one character off
        assert status_of(f"{base}{wrong}/ws") == 403
        # a name that points at this machine from elsewhere (another Host) is refused too
        assert status_of(server.url, {"Host": f"example.invalid:{server.port}"}) == 403
        # 127.0.0.1 in the kernel's little-endian hex is 0100007F (Linux /proc/net/tcp)
        assert listening_addresses(server.port) == ["0100007F"]
        assert len(server.token) >= 32  # secrets.token_urlsafe(24): 192 random bits


def test_a_websocket_without_the_token_is_refused(tmp_path, jack_server, browser):
    wav, _ = noise_wav(tmp_path, 0.5)
    player = player_for(NAMES, wav, [])
    with served(player) as (server, _, _):
        page = browser.new_page()
        page.goto(f"http://127.0.0.1:{server.port}/nothing-here/")
        assert "forbidden" in page.content()
        result = page.evaluate(
            """url => new Promise(done => {
                const ws = new WebSocket(url);
                ws.onopen = () => done("open");
                ws.onerror = () => done("refused");
            })""",
            f"ws://127.0.0.1:{server.port}/wrong-token/ws",
        )
        assert result == "refused"
        page.close()


# --- candidates, stage cards, audio ----------------------------------------------------------


SEGMENT = 512


def where_in(segment: np.ndarray, reference: np.ndarray) -> float:
    """Smallest largest-difference of ``segment`` against any stretch of ``reference``."""
    scores = signal.correlate(reference, segment, mode="valid", method="fft")
    best = np.argsort(scores)[-3:]  # the matching stretch correlates best (noise input)
    return min(float(np.max(np.abs(reference[k : k + len(segment)] - segment))) for k in best)


def heard_as(y: np.ndarray, references: list[np.ndarray], starts) -> list[int | None]:
    """For each segment of ``y``: which reference it is a stretch of (1e-6), or None.

    Each segment is found on its own in the looped reference, so the check does not depend
    on knowing when the file's loop started.
    """
    found = []
    for k in starts:
        errors = [where_in(y[k : k + SEGMENT], r) for r in references]
        best = int(np.argmin(errors))
        found.append(best if errors[best] < 1e-6 else None)
    return found


def test_clicking_candidate_b_makes_the_output_b_s_twin(tmp_path, jack_server, browser):
    wav, source = noise_wav(tmp_path, 2.0)
    looped = np.concatenate([source] * 4).astype(np.float64)[:, 0]
    printed: list[str] = []
    player = player_for(NAMES, wav, printed)
    with served(player, record_s=3.0) as (server, recorder, _):
        page = open_page(browser, server)
        time.sleep(1.0)
        clicked_at = recorder.position
        page.click("[data-candidate=B]")
        page.wait_for_selector("[data-candidate=B].on")
        assert "hearing B · candidate-bessel" in page.inner_text("#hearing")
        fidelity = page.inner_text("[data-fidelity=B]")
        time.sleep(1.2)
        page.close()
    y = recorder.data[: recorder.position, 0].astype(np.float64)
    xruns = int(player.core.counters[1]) + recorder.xruns
    start, end = signal_start(y[:, None]), int(np.max(np.nonzero(y)))
    # each twin on the looped file as render runs it (its resamplers included: checked
    # against scipy.signal.upfirdn and sosfilt in test_render.py): the reference for what is
    # heard; where_in finds each stretch at any offset, so the live delay does not matter
    refs = [render_array(t, looped[:, None], 16384)[0, :, 0] for t in player.session.twins]
    first = heard_as(y, refs, np.linspace(start + 0.1 * RATE_HZ, clicked_at - 2048, 8, dtype=int))
    last = heard_as(y, refs, np.linspace(end - 0.6 * RATE_HZ, end - 1024, 8, dtype=int))
    assert 1 not in first and 0 not in last, (first, last)  # never the other candidate
    # the candidate's fidelity reads as the terminal's fidelity line says it (the same
    # largest deviation and where), e.g. "twin within 0.303 dB of analog (at 16.83 kHz)"
    found = re.fullmatch(r"twin within (\S+) dB of analog \(at (.+?)\)( · .*)?", fidelity)
    assert found, fidelity
    line = next(p for p in printed if p.startswith("B candidate-bessel"))
    assert f"within {found[1]} dB (at {found[2]})" in line, (fidelity, line)
    # every stretch is the twin's output to float32 rounding; on a busy machine a stretch
    # across a block JACK dropped (an xrun) matches neither, so most must match then
    need = 8 if xruns == 0 else 4
    assert first.count(0) >= need and last.count(1) >= need, (first, last, xruns)


def card_numbers(page, key: str) -> tuple[float, float]:
    f0 = float(page.get_attribute(f"[data-f0='{key}']", "data-value"))
    q = float(page.get_attribute(f"[data-q='{key}']", "data-value"))
    return f0, q


def test_stepping_a_capacitor_moves_the_card_the_plot_and_the_sound_without_a_click(
    tmp_path, jack_server, browser
):
    f_hz, amplitude = 3000.0, 0.3
    t = np.arange(3 * RATE_HZ) / RATE_HZ
    wav = write_wav(tmp_path / "sine.wav", amplitude * np.sin(2 * np.pi * f_hz * t))
    player = player_for(NAMES[:1], wav, [])
    old_design = player.session.candidates[0].design
    old_stage = old_design.filter("topcut").stages[1]
    tap = SignalTap(2**18)  # 5.5 s of what the callback hands to the stream, for the click
    with served(player, record_s=3.0) as (server, recorder, _):
        player.core.tap = server.link.tap = tap
        page = open_page(browser, server)
        time.sleep(0.8)
        drawn = page.get_attribute("#response", "data-drawn")
        picture = page.evaluate("document.getElementById('response').toDataURL()")
        edit_at = recorder.position
        page.click("[data-step='low-2-C1-up']")
        page.wait_for_function(
            "old => document.getElementById('response').dataset.drawn !== old", arg=drawn
        )
        value = page.inner_text("[data-part='low-2-C1']")
        f0, q = card_numbers(page, "low-2")
        redrawn = page.evaluate("document.getElementById('response').toDataURL()") != picture
        time.sleep(1.0)
        page.close()
        _, played, frames = tap.latest(tap.ring.shape[1])
    new_c1 = eseries.step(old_stage.circuit.c1, "E12", 1)  # IEC 60063 E12: 27n -> 33n
    assert value == "33n" and math.isclose(new_c1, 33e-9, rel_tol=1e-12)
    # the node equations of the stepped circuit with the design's amplifier
    model = sallenkey.analyze(old_stage.circuit.with_parts(C1=new_c1), old_design.amplifier)
    assert f0 == pytest.approx(model.f0_hz, rel=1e-9)
    assert q == pytest.approx(model.q, rel=1e-9)
    assert redrawn
    # the sound: before and after the edit the sine has the old and the new twin's gain
    # (scipy.signal.sosfreqz of each twin); amplitudes fitted on short stretches, median
    # (at the rate the twin runs: oversampled, its resamplers flat to 1e-6 dB at 3 kHz)
    twin_hz = player.session.twins[0].rate_hz
    old_sos = player_twin_sos(old_design, player.session.twins[0].oversampling)
    old_gain = abs(signal.sosfreqz(old_sos, [f_hz], fs=twin_hz)[1][0])
    new_sos = player.session.twins[0].filters[0].sos
    new_gain = abs(signal.sosfreqz(new_sos, [f_hz], fs=twin_hz)[1][0])
    assert abs(new_gain - old_gain) > 0.02  # the step is audible at 3 kHz
    y = recorder.data[: recorder.position, 0].astype(np.float64)
    start, end = signal_start(y[:, None]), int(np.max(np.nonzero(y)))
    before = stretch_amplitude(y[start + int(0.3 * RATE_HZ) : edit_at - 512], f_hz)
    after = stretch_amplitude(y[end - int(0.5 * RATE_HZ) : end - 1024], f_hz)
    assert before == pytest.approx(amplitude * old_gain, rel=1e-3)
    assert after == pytest.approx(amplitude * new_gain, rel=1e-3)
    # no click in what the callback played (the tap holds it whole, whatever JACK dropped):
    # a sine of amplitude A moves at most 2 pi f / fs A per sample (hand derivation); the
    # new coefficients take over from the old state, 10 % margin
    assert frames < len(played)
    out = played[len(played) - frames :]
    begin = signal_start(out[:, None]) + int(0.3 * RATE_HZ)
    stop = int(np.max(np.nonzero(out)))
    assert stop - begin > 1.5 * RATE_HZ  # the edit is inside
    bound = 2 * math.pi * f_hz / RATE_HZ * amplitude * max(old_gain, new_gain) * 1.10
    assert np.max(np.abs(np.diff(out[begin:stop]))) < bound


def stretch_amplitude(y: np.ndarray, f_hz: float, frames: int = 2048) -> float:
    """Median over stretches of the least-squares amplitude of a sine of known frequency
    (a stretch across a block that JACK dropped is an outlier the median ignores)."""
    fits = [sine_amplitude(y[k : k + frames], f_hz) for k in range(0, len(y) - frames, frames)]
    return float(np.median(fits))


def player_twin_sos(design, oversampling: int) -> np.ndarray:
    from filtertwin.digital.twin import build_twin

    return build_twin(design, RATE_HZ, oversampling=oversampling).filters[0].sos


def sine_amplitude(y: np.ndarray, f_hz: float) -> float:
    """Least-squares amplitude of a sine of known frequency (plus offset)."""
    n = np.arange(len(y))
    w = 2 * np.pi * f_hz / RATE_HZ
    basis = np.column_stack([np.sin(w * n), np.cos(w * n), np.ones(len(y))])
    coef, *_ = np.linalg.lstsq(basis, y, rcond=None)
    return float(math.hypot(coef[0], coef[1]))


# --- spectrum, screenshot ----------------------------------------------------------------------


def test_the_live_spectrum_updates_20_times_a_second_and_the_window_is_not_blank(
    tmp_path, jack_server, browser
):
    wav = Path(__file__).resolve().parents[1] / "audio_samples" / "program_48k.wav"
    player = player_for(["bookshelf-2way", "candidate-butterworth"], wav, [])
    with served(player) as (server, _, _):
        page = open_page(browser, server)
        page.wait_for_selector("[data-f0='low-1']")
        time.sleep(0.5)
        first = int(page.get_attribute("#spectrum", "data-frames"))
        time.sleep(2.0)
        frames = int(page.get_attribute("#spectrum", "data-frames")) - first
        shot = tmp_path / "preview-window.png"
        page.screenshot(path=str(shot), full_page=True)
        # phase and group delay on demand, and the tolerance envelope
        views_drawn = []
        for view in ("phase", "delay", "magnitude"):
            page.select_option("#response-view", view)
            views_drawn.append(page.get_attribute("#response", "data-drawn").split(":")[1])
        plain = page.evaluate("document.getElementById('response').toDataURL()")
        page.check("#envelope")
        page.wait_for_function(
            "old => document.getElementById('response').toDataURL() !== old", arg=plain
        )
        page.close()
    assert views_drawn == ["phase", "delay", "magnitude"]
    print(f"\npreview window screenshot: {shot}; spectrum {frames / 2.0:.1f} frames/s")
    assert frames >= 2.0 * 20  # 20 frames a second or more (the requirement)
    import matplotlib.image

    pixels = matplotlib.image.imread(shot)[..., :3]
    colours = np.unique((pixels * 255).astype(np.uint8).reshape(-1, 3), axis=0)
    assert pixels.std() > 0.05 and len(colours) > 200  # drawn, not one flat colour


# --- blind trials ------------------------------------------------------------------------------


def test_blind_trials_show_nothing_of_x_and_end_with_the_exact_binomial_p_value(
    tmp_path, jack_server, browser
):
    wav, _ = noise_wav(tmp_path, 1.0)
    player = player_for(NAMES, wav, [], blind="abx", trials=4, seed=7)
    plan = player.session.blind.plan
    frames: list[str] = []
    names = [*NAMES, "Butterworth", "Bessel", "butterworth", "bessel", "topcut"]
    answers = ["A", "B", "B", "A"]
    with served(player) as (server, _, _):
        page = browser.new_page()
        page.on("websocket", lambda ws: ws.on("framereceived", lambda f: frames.append(str(f))))
        page.goto(server.url)
        page.wait_for_selector("#blind:not([hidden]) [data-answer=A]")
        for trial, answer in enumerate(answers, start=1):
            for button in ("A", "X", "B", "X"):
                page.click(f"[data-listen={button}]")
                page.wait_for_selector(f"[data-listen={button}].on")
            time.sleep(0.2)
            html = page.content()
            assert not any(name in html for name in names)
            assert page.locator(".meter, .card, [data-candidate]").count() == 0
            assert page.get_attribute("#spectrum", "data-frames") is None  # never drawn
            before_last_answer = len(frames)
            page.click(f"[data-answer={answer}]")
            if trial < len(answers):
                page.wait_for_selector(f"#blind-title:text('trial {trial + 1} of')")
        page.wait_for_selector("[data-p-value]")
        shown_p = float(page.get_attribute("[data-p-value]", "data-p-value"))
        result = page.inner_text("#blind-result")
        page.close()
    # nothing the page received before the last answer names a design (on the wire too)
    received = frames[:before_last_answer]
    assert received and not any(name in f for f in received for name in names)
    assert any(name in f for f in frames[before_last_answer:] for name in NAMES)  # revealed
    hits = sum(a == x for a, x in zip(answers, plan.x_is, strict=True))
    expected = stats.binomtest(hits, 4, 0.5, alternative="greater").pvalue  # exact binomial
    assert shown_p == expected
    assert f"{hits} of 4 right" in result and "A was" in result
    assert all(json.loads(f)["type"] in ("said", "state", "ended", "live") for f in frames)


# --- undo, redo, save as; the terminal alongside -------------------------------------------------


def test_undo_redo_and_save_as_from_the_page_and_the_terminal_drives_the_same_session(
    tmp_path, jack_server, browser, monkeypatch
):
    from filtertwin.circuit.design import build_design
    from filtertwin.circuit.spec import load_design
    from filtertwin.live.keys import Command

    monkeypatch.chdir(tmp_path)
    wav, _ = noise_wav(tmp_path, 1.0)
    said: list[str] = []
    player = player_for(NAMES, wav, said)
    with served(player) as (server, _, _):
        page = open_page(browser, server)
        part = "[data-part='low-2-C1']"
        page.click("[data-step='low-2-C1-up']")
        page.wait_for_selector(f"{part}:text-is('33n')")
        page.click("#undo")
        page.wait_for_selector(f"{part}:text-is('27n')")
        assert page.is_enabled("#redo")
        page.click("#redo")
        page.wait_for_selector(f"{part}:text-is('33n')")
        page.fill("#save-name", "my-build.toml")
        page.click("#save")
        page.wait_for_selector("#said:has-text('saved A as my-build.toml')")
        page.click("#save")  # the same name again: refused, nothing overwritten
        page.wait_for_selector("#said:has-text('exists; choose a new name')")
        # a terminal key or script line goes to the same session: the page follows it
        player.session.handle(Command("select", ("2",)), time.monotonic())
        page.wait_for_selector("[data-candidate=B].on")
        assert "hearing B" in page.inner_text("#hearing")
        page.close()
    saved = build_design(load_design(tmp_path / "my-build.toml"))
    assert saved.filter("topcut").stages[1].circuit.c1 == pytest.approx(33e-9, rel=1e-12)
    assert any("saved A as my-build.toml" in line for line in said)


# --- the command line ------------------------------------------------------------------------


def test_listen_window_from_the_command_line_prints_the_address_and_serves_the_page(
    tmp_path, jack_server
):
    import os
    import shutil
    import subprocess
    import sys

    wav, _ = noise_wav(tmp_path, 1.0)
    env = {
        k: v for k, v in os.environ.items() if k not in ("DISPLAY", "WAYLAND_DISPLAY", "BROWSER")
    }
    env["PYTHONPATH"] = str(Path(__file__).resolve().parents[1] / "src")
    command = [sys.executable, "-m", "filtertwin", "listen", "candidate-butterworth", "--input",
               str(wav), "--device", "system", "--window", "--duration", "6"]  # fmt: skip
    process = subprocess.Popen(
        command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, stdin=subprocess.DEVNULL,
        text=True, env=env,
    )  # fmt: skip
    lines = []
    try:
        while not lines or not lines[-1].startswith("preview window: "):
            line = process.stdout.readline()
            assert line, "the address was never printed"
            lines.append(line)
        url = lines[-1].split()[2]
        assert url.startswith("http://127.0.0.1:")
        assert status_of(url) == 200 and status_of(url + "app.js") == 200
        assert status_of(url.rsplit("/", 2)[0] + "/") == 403
        rest = process.stdout.read()  # the same buffered reader, up to the end of the run
        process.wait(timeout=30)
        errors = process.stderr.read()
    finally:
        if process.poll() is None:
            process.kill()
    text = "".join(lines) + rest
    assert process.returncode == 0, errors
    assert "stopped (duration)" in text and "Traceback" not in errors
    console_browsers = ("www-browser", "links", "elinks", "lynx", "w3m")
    if not any(shutil.which(b) for b in console_browsers):  # a headless machine, as in CI
        assert "no web browser found here: open the address above in one" in text


# --- the loop: jump and region -----------------------------------------------------------------


def source_position_s(dry: np.ndarray, source: np.ndarray) -> float | None:
    """Where in the source file a stretch of the heard dry input starts (seconds), or None
    when it is no exact stretch of it (it holds a crossfade)."""
    mono = source.astype(np.float64).mean(axis=1)
    scores = signal.correlate(mono, dry, mode="valid", method="fft")
    k = int(np.argmax(scores))
    return k / RATE_HZ if np.max(np.abs(mono[k : k + len(dry)] - dry)) < 1e-6 else None


def test_clicking_the_loop_bar_jumps_and_a_region_keeps_the_loop_inside_it(
    tmp_path, jack_server, browser
):
    wav, source = noise_wav(tmp_path, 4.0)  # 0.17 s of silence, then 4 s of noise
    length_s = len(source) / RATE_HZ
    player = player_for(NAMES[:1], wav, [])
    with served(player) as (server, _, _):
        page = open_page(browser, server)
        page.wait_for_selector("#loop-text[data-position]")
        box = page.locator("#loop").bounding_box()
        page.mouse.click(box["x"] + 0.75 * box["width"], box["y"] + box["height"] / 2)
        time.sleep(0.6)  # the read-ahead (0.25 s) in front of the jump plays first
        dry, _, _ = server.link.tap.latest(4096)
        jumped_to = source_position_s(dry[-2048:], source)
        assert jumped_to is not None
        shown = float(page.get_attribute("#loop-text", "data-position"))
        page.fill("#loop-start", "1.0")
        page.fill("#loop-end", "1.5")
        page.click("#loop-set")
        page.wait_for_selector("#loop-text:has-text('looping 1.0 to 1.5 s')")
        time.sleep(1.2)  # more than two rounds of the 0.5 s region
        heard = []
        for _ in range(12):
            dry, _, _ = server.link.tap.latest(1024)
            heard.append(source_position_s(dry, source))
            time.sleep(0.07)
        page.close()
    # the click at 3/4 of the bar asks for 0.75 x the file's length; 0.6 s later the heard
    # stretch starts between there and 0.6 s on (plus a block)
    target = 0.75 * length_s
    assert target - 0.01 <= jumped_to <= target + 0.6 + 0.05, (target, jumped_to)
    assert abs(shown - (jumped_to + 2048 / RATE_HZ)) < 0.35  # the page shows where it is
    found = [s for s in heard if s is not None]  # a stretch across the crossfaded wrap: None
    assert len(found) >= 6, heard
    for start in found:  # every stretch heard lies inside the region (1024 frames long)
        assert 1.0 - 1e-9 <= start and start + 1024 / RATE_HZ <= 1.5 + 1e-9, heard


# --- clip and slew flags on the stage cards ----------------------------------------------------


def test_a_hot_15_khz_sine_lights_the_slew_flag_on_the_slewing_stage_card_only(
    tmp_path, jack_server, browser
):
    design_file = tmp_path / "slow.toml"
    design_file.write_text(
        "# invented scenario: a 2-way split on a slow amplifier\n"
        'title = "2-way split on a slow amplifier (invented)"\n'
        '[amplifier]\npreset = "general-purpose bipolar"\n'  # 0.5 V/us, 13 V swing
        '[signal]\nfull_scale = "10 V"\n'
        '[[filter]]\nname = "woof"\nresponse = "lowpass"\nalignment = "butterworth"\n'
        'order = 2\ncorner = "1 kHz"\n'
        '[[filter]]\nname = "tweet"\nresponse = "highpass"\nalignment = "butterworth"\n'
        'order = 2\ncorner = "20 Hz"\n'
    )
    t = np.arange(4 * RATE_HZ) / RATE_HZ
    hot = np.concatenate([np.zeros(PREROLL), 0.9 * np.sin(2 * math.pi * 15000.0 * t)])
    wav = write_wav(tmp_path / "hot.wav", np.repeat(hot[:, None], 2, axis=1).astype(np.float32))
    player = player_for([str(design_file)], wav, [])
    with served(player) as (server, _, _):
        page = open_page(browser, server)
        page.wait_for_selector("[data-label='tweet s1']")
        # 15 kHz at 9 V peak needs a slope of 2 pi f A = 0.85 V/us, above the amplifier's
        # 0.5 V/us (slew rate, Horowitz & Hill): the high-pass stage passes it whole and slews
        page.wait_for_selector("[data-slew-flag='tweet s1']:not([hidden])", timeout=5000)
        # the 1 kHz low-pass leaves 9 V / (15 kHz / 1 kHz)^2 = 0.04 V at 15 kHz (second-order
        # roll-off, 40 dB a decade): 0.004 V/us, far below the slew rate; nor does anything
        # reach the 13 V swing
        low_slewing = page.is_visible("[data-slew-flag='woof s1']")
        clip_shown = page.is_visible("[data-clip-flag]")
        card_class = page.get_attribute("[data-label='tweet s1']", "class")
        facts = page.inner_text("#facts")
        page.close()
    assert not low_slewing and not clip_shown
    assert "slew" in card_class.split()
    assert "tweet s1" in facts  # the meters' list of slewing stages names it too


# --- circuit noise on and off --------------------------------------------------------------------


def test_the_noise_button_switches_the_circuit_noise_heard_at_its_computed_level(
    tmp_path, jack_server, browser
):
    from filtertwin.circuit.noise import filter_noise

    wav = write_wav(tmp_path / "silence.wav", np.zeros((4 * RATE_HZ, 2), np.float32))
    player = player_for(["bookshelf-2way"], wav, [])
    with served(player, record_s=8.0) as (server, recorder, _):
        page = open_page(browser, server)
        page.wait_for_selector("#noise[data-state='off']")
        time.sleep(1.0)
        off_until = recorder.position
        page.click("#noise")
        page.wait_for_selector("#noise.on[data-state='on']")
        facts_on = page.inner_text("#facts")
        on_from = recorder.position + RATE_HZ // 2  # after the fade in
        time.sleep(3.0)
        on_until = recorder.position
        page.click("#noise")
        page.wait_for_selector("#noise[data-state='off']:not(.on)")
        time.sleep(1.0)
        page.close()
    assert player.session.noise is not None and not player.session.noise.on
    assert "circuit noise\non" in facts_on or "circuit noise\ton" in facts_on
    y = recorder.data[: recorder.position].astype(np.float64)
    assert not np.any(y[:off_until])  # silence in, noise off: exact zeros out
    on = y[on_from:on_until]
    on = on[np.any(on != 0, axis=1)]  # a late callback (xrun) plays zeros: leave them out
    # the heard noise power against the node equations' output noise density of each way,
    # summed over 20 Hz to 20 kHz (filtertwin.circuit.noise, as render adds it) in full-scale units
    f, psd = signal.welch(on, RATE_HZ, nperseg=4096, axis=0)  # Welch 1967, via scipy.signal
    band = (f >= 20) & (f <= 20000)
    d = player.session.candidates[0].design
    expect = (
        sum(
            filter_noise(w, d.amplifier, f[band], d.spec.parts.temperature_k).psd_v2_per_hz
            for w in d.filters
        )
        / d.spec.full_scale_v**2
    )
    error_db = 10 * np.log10(np.sum(psd.mean(axis=1)[band]) / np.sum(expect))
    assert abs(error_db) < 0.5, error_db
    assert not np.any(y[-RATE_HZ // 4 :])  # off again: zeros after the fade out
