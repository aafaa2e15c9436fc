"""`listen` with the circuit's own noise (`noise on|off`, key n, `--circuit-noise`).

The callback is driven block by block with a ring of known noise (no stream); one recording
goes through a real PortAudio stream on the JACK dummy server and is compared with the
density the node equations give (filtertwin.circuit.noise).
"""

import time

import numpy as np
import pytest
from scipy import signal, stats

from filtertwin import examples
from filtertwin.circuit.design import build_design
from filtertwin.circuit.noise import CircuitNoiseSource, filter_noise
from filtertwin.circuit.spec import load_design
from filtertwin.digital.engine import CascadeRunner
from filtertwin.digital.twin import build_twin
from filtertwin.live import candidates as cands
from filtertwin.live.blind import BlindSession, TrialLog, plan_trials
from filtertwin.live.hiss import LiveNoise, NoiseAdder, NoiseFeeder, noise_ring
from filtertwin.live.keys import Command, command_for_key, help_text, parse_command
from filtertwin.live.matching import LevelMatch
from filtertwin.live.ring import BlockRing
from filtertwin.live.safety import OutputSafety
from filtertwin.live.session import ListenSession
from filtertwin.live.status import StatusReader, status_line, summary_lines
from filtertwin.live.stream import StreamCore

RATE_HZ = 48000
BLOCK = 256
FADE_S = 0.03


def load(name):
    return build_design(load_design(examples.resolve(name)))


class HandFed(NoiseFeeder):
    """A noise feeder whose ring the test fills by hand: its thread never starts."""

    def start(self):
        self.ready.set()


def setup(names=("bookshelf-2way",), gains=None, feeder_kind=HandFed, blind=None):
    """A core with a runner (a recording at the stream's rate, twins at 1x: the noise is
    added after them), its noise ring (filled by hand, or by a real feeder thread) and its
    session, started (with ``blind`` trials if given); the input is silent."""
    candidates = cands.make_candidates([(n, load(n)) for n in names])
    twins = tuple(build_twin(c.design, RATE_HZ, oversampling=1) for c in candidates)
    sos, levels = cands.chains(twins)
    ring = noise_ring(len(sos), 1)
    adder = NoiseAdder(ring, len(sos), BLOCK, RATE_HZ, FADE_S)
    core = StreamCore(
        n_chains=len(sos), channels=1, block_frames=BLOCK, rate_hz=RATE_HZ,
        runner=CascadeRunner(sos, 1, BLOCK, levels, dtype=np.float32),
        ring=BlockRing(1, 64 * BLOCK, 1), safety=OutputSafety(RATE_HZ, ramp_s=0.001),
        noise=adder,
    )  # fmt: skip
    core.prime()
    gains = np.ones(len(candidates)) if gains is None else np.asarray(gains, float)
    match = LevelMatch("off", (0.0,) * len(gains), 0.0, tuple(gains), 1.0)
    feeder = feeder_kind([c.design for c in candidates], RATE_HZ, 1, ring)
    said = []
    session = ListenSession(
        candidates, twins, core, core, RATE_HZ, match, blind=blind, say=said.append,
        noise=LiveNoise(adder, feeder),
    )  # fmt: skip
    session.start(0.0)
    return core, session, ring, said


def fill(ring, noise):
    """Write ``noise`` (chains, frames) into the noise ring."""
    assert ring.write(np.ascontiguousarray(noise[:, :, None], np.float32)) == noise.shape[1]


def play(core, blocks):
    """Run the callback on ``blocks`` blocks of silence; the left output."""
    out = np.zeros((blocks * BLOCK, 2), dtype=np.float32)
    for start in range(0, len(out), BLOCK):
        core.ring.write(np.zeros((1, BLOCK, 1), np.float32))
        core.process(None, out[start : start + BLOCK], False)
    return out[:, 0].astype(np.float64)


def test_the_noise_fades_in_and_out_along_a_straight_line_with_each_ways_gain():
    core, session, ring, said = setup(gains=[0.5])
    noise = (1e-3 * np.random.default_rng(3).standard_normal((2, 16 * BLOCK))).astype(np.float32)
    fill(ring, noise)
    assert not play(core, 8).any()  # off: exact zeros (and the selection's fade is over)
    assert ring.available_frames == 16 * BLOCK  # the ring is not even read
    session.handle(command_for_key("n"), 1.0)
    assert said[-1].startswith("circuit noise on")
    on = play(core, 8)
    fade = round(FADE_S * RATE_HZ)
    ramp = np.minimum(1.0, np.arange(1, len(on) + 1) / fade)
    both = noise[0].astype(np.float64) + noise[1]
    # hand derivation: the mixer's sum of the two ways' noise times the way's gain (0.5, its
    # level match) times a linear ramp over the crossfade time (float32 rounding of each
    # way, 2^-24 of its largest value, 4e-3: a few 1e-10)
    np.testing.assert_allclose(on, 0.5 * ramp * both[: len(on)], rtol=1e-6, atol=2e-9)
    session.handle(parse_command("noise off"), 2.0)
    assert said[-1] == "circuit noise off"
    off = play(core, 8)
    fading = 0.5 * (1 - ramp[:fade]) * both[len(on) : len(on) + fade]
    np.testing.assert_allclose(off[:fade], fading, rtol=1e-6, atol=2e-9)
    assert not off[fade:].any()  # exact zeros once faded out


def test_solo_applies_to_the_noise_as_to_the_signal():
    core, session, ring, _ = setup()
    noise = (1e-3 * np.random.default_rng(4).standard_normal((2, 16 * BLOCK))).astype(np.float32)
    fill(ring, noise)
    session.handle(Command("noise", ("on",)), 0.0)
    session.handle(Command("solo", ("high",)), 0.0)
    y = play(core, 8)[-BLOCK:]
    # after both fades: the tweeter's noise alone (chain order: the design's filters)
    np.testing.assert_allclose(y, noise[1, 7 * BLOCK : 8 * BLOCK], rtol=1e-6)


def test_the_status_line_and_the_help_show_the_noise():
    core, session, _, _ = setup()
    reader = StatusReader(session)
    assert "noise on" not in status_line(reader.facts()).split(" | ")
    session.handle(Command("noise"), 1.0)  # no word: switch
    facts = reader.facts()
    assert status_line(facts).split(" | ")[:3] == ["A bookshelf-2way", "all ways", "noise on"]
    narrow = status_line(facts, width=80)  # meters and timing go first, the noise state stays
    assert len(narrow) <= 79 and "noise on" in narrow.split(" | ")
    assert "n      the circuit's own noise on or off" in help_text()
    assert "noise on|off" in help_text().split("commands, typed after e")[1]
    with pytest.raises(Exception, match=r"noise takes on, off, not 'loud'"):
        parse_command("noise loud")


def test_noise_the_thread_did_not_make_in_time_is_counted_in_the_summary():
    core, session, ring, said = setup()
    assert not any("circuit noise" in line for line in summary_lines(session, 0.0))
    fill(ring, np.zeros((2, 3 * BLOCK), np.float32))  # the thread made 3 blocks' worth
    session.handle(Command("noise", ("on",)), 0.0)
    play(core, 8)
    # 8 blocks played, 3 held noise: 5 blocks of frames had none (counted by hand)
    assert "circuit noise: 1280 frames not made in time" in summary_lines(session, 0.0)
    fill(ring, np.zeros((2, 8 * BLOCK), np.float32))  # enough for the fade out
    session.handle(Command("noise", ("off",)), 1.0)
    play(core, 16)  # faded out after 6 blocks: the ring is no longer read, nothing counted
    assert "circuit noise: 1280 frames not made in time" in summary_lines(session, 0.0)


def test_a_part_edit_makes_the_noise_follow_the_edited_design():
    core, session, ring, said = setup(feeder_kind=NoiseFeeder)
    feeder = session.noise.feeder
    assert not feeder.ready.is_set()  # nothing is made before the noise is asked for
    try:
        session.handle(Command("noise", ("on",)), 0.5)  # starts the thread and waits for it
        old = feeder._sources[0].firs.copy()
        session.handle(parse_command("part low 1 R1 +6"), 1.0)  # six E-series steps up
        edited = session.candidates[0].design
        deadline = time.monotonic() + 20
        while feeder.designs[0] is not edited and time.monotonic() < deadline:
            ring.read_into(np.zeros((2, 4096, 1), np.float32))  # make room: the thread goes on
            time.sleep(0.01)
        assert feeder.designs[0] is edited, said
        names = [f.name for f in edited.filters]
        reference = CircuitNoiseSource(edited, names, RATE_HZ, 1).firs  # filtertwin.circuit.noise
        np.testing.assert_array_equal(feeder._sources[0].firs, reference)
        assert np.max(np.abs(reference[0] - old[0])) > 1e-3 * np.max(np.abs(old[0]))
    finally:
        feeder.stop()


@pytest.mark.live
def test_the_streamed_noise_has_the_computed_density_and_is_zero_when_off(tmp_path, jack_server):
    from test_live_listen_stream import player_for, record, write_wav

    seconds = 30.0
    wav = write_wav(tmp_path / "silence.wav", np.zeros((RATE_HZ, 2), np.float32))
    actions = [(seconds, Command("noise", ("off",)))]
    player = player_for(["bookshelf-2way"], wav, [], circuit_noise=True)
    # 3 s after the switch: the recording also holds the time the stream took to start
    # (the read-ahead and the noise filled first), within a buffer of the length asked + 1 s
    y, xruns, recorder_xruns = record(player, seconds + 3.0, actions)
    print(f"xruns {xruns} + {recorder_xruns}")
    start = int(np.argmax(np.any(y != 0, axis=1)))
    on = y[start + RATE_HZ // 2 : start + round((seconds - 1.5) * RATE_HZ)].astype(np.float64)
    # a late callback (xrun, many on 2 busy cores) plays a period of exact zeros: leave those
    # frames out (noise is never exactly zero on both channels otherwise)
    dropped = ~np.any(on != 0, axis=1)
    print(f"{np.count_nonzero(dropped)} frames of silence from xruns left out")
    on = on[~dropped]
    f, psd = signal.welch(on, RATE_HZ, nperseg=4096, axis=0)  # Welch 1967, via scipy.signal
    psd = psd.mean(axis=1)  # the two channels: independent noise, the same density
    band = (f >= 20) & (f <= 20000)
    d = player.session.candidates[0].design
    expect = (
        sum(
            filter_noise(
                d.filter(w.name), d.amplifier, f[band], d.spec.parts.temperature_k
            ).psd_v2_per_hz
            for w in d.filters
        )
        / d.spec.full_scale_v**2
    )  # the twin's units: 1.0 = full scale
    error_db = 10 * np.log10(psd[band] / expect)
    print(f"largest deviation {np.max(np.abs(error_db)):.2f} dB")
    assert np.max(np.abs(error_db)) < 1.0  # filtertwin.circuit.noise node equations, as in render
    end = np.flatnonzero(np.any(y != 0, axis=1))[-1]
    assert len(y) - end > RATE_HZ // 2  # after the fade: half a second of exact zeros


def test_blind_trials_with_the_noise_on_hear_each_designs_own_noise_and_show_nothing_else(
    tmp_path,
):
    from test_live_listen_blind_reader import screen_guess

    trials = 40
    names = ("candidate-butterworth", "candidate-bessel")
    plan = plan_trials(names, trials, 5, "abx")
    blind = BlindSession(plan, TrialLog(tmp_path / "trials.csv", plan))
    core, session, ring, said = setup(names, blind=blind)
    core._clock = lambda: 0.0  # callback times made equal (every chain runs always)
    now = [0.0]
    reader = StatusReader(session, lambda: 0.05, clock=lambda: now[0])
    session.handle(Command("noise", ("on",)), 0.0)
    # each design's own noise, B's three times A's: what is heard tells them apart
    rng = np.random.default_rng(8)
    amplitude = np.array([1e-3, 3e-3])[:, None]
    rms_heard, screen_hits = {}, 0
    for trial in range(trials):
        seen = {}
        for button in rng.permutation(["A", "B", "X"]):
            first_line = len(said)
            session.handle(Command("listen", (button,)), now[0])
            heard = []
            for _ in range(3):  # 12 blocks: the crossfade is over after the first 6
                fill(ring, (amplitude * rng.standard_normal((2, 4 * BLOCK))).astype(np.float32))
                heard.append(play(core, 4))
            rms_heard[button] = np.sqrt(np.mean(heard[-1] ** 2))
            now[0] += 1.0
            line = status_line(reader.facts()).rsplit(" | ", 1)[0]  # without the clock
            screen = " ".join(said[first_line:]) + " " + line
            seen[button] = screen.replace(f": {button}", ":").replace(f"now {button}", "now")
        x_is = plan.x_is[trial]
        # X sounds like its own design: the noise is each candidate's (1024 samples: the
        # rms within 15 % of the hidden design's, 3x apart from the other's)
        assert abs(rms_heard["X"] / rms_heard[x_is] - 1) < 0.15
        screen_hits += screen_guess(seen) == x_is
        session.handle(Command("answer", ("A",)), now[0])
    assert all("noise on" in s for s in seen.values())  # the same for both designs
    # exact one-sided binomial test against guessing (Clark 1982; scipy.stats.binomtest)
    assert stats.binomtest(screen_hits, trials, 0.5, alternative="greater").pvalue > 0.01
