"""Invented demo recordings, synthesised from fixed seeds: byte for byte the same every run.

The music-like program, pink noise, a logarithmic sweep, and an invented pump-motor vibration
recording for the anti-alias scenario. ``tools/make_samples.py`` writes them into
``audio_samples/``; ``filtertwin demo`` writes the ones it needs into its own folder, so the
demo works from any folder once the package is installed.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
from scipy import signal

from filtertwin.files import outputs

SEED = 60063
AUDIO_RATE_HZ = 48000

PROGRAM_BPM = 128.0  # 32 beats at 128 BPM = 15.0 s
PROGRAM_BARS = 8
PROGRAM_PEAK_DBFS = -3.0
# (bass root MIDI note, chord MIDI notes) per bar: A minor, F major, C major, G major
PROGRAM_CHORDS = ((33, (57, 60, 64)), (29, (53, 57, 60)), (36, (55, 60, 64)), (31, (55, 59, 62)))
BASS_PATTERN = (0, 0, 12, 0, 0, 7, 12, 0)  # semitones above the root, one per eighth note

PINK_SECONDS = 5.0
PINK_RMS_DBFS = -20.0  # 20 log10(RMS), full scale = 1.0
PINK_LOW_HZ = 10.0  # no content below (the band of interest starts at 20 Hz)

SWEEP_SECONDS = 5.0
SWEEP_START_HZ = 20.0
SWEEP_STOP_HZ = 20000.0
SWEEP_PEAK_DBFS = -6.0
SWEEP_FADE_IN_S = 0.05
SWEEP_FADE_OUT_S = 0.01

VIB_RATE_HZ = 51200
VIB_SECONDS = 4.0
VIB_CSV_SECONDS = 1.0
SHAFT_HZ = 24.7
LOGGER_ADC_RATE_HZ = 8000.0
VIB_NOISE_RMS_G = 0.003
# (name, kind, frequency in Hz, peak amplitude in g)
VIB_TONES = (
    ("shaft 1x", "shaft", SHAFT_HZ, 0.060),
    ("shaft 2x", "shaft", round(2 * SHAFT_HZ, 6), 0.025),
    ("shaft 3x", "shaft", round(3 * SHAFT_HZ, 6), 0.012),
    ("shaft 4x", "shaft", round(4 * SHAFT_HZ, 6), 0.006),
    ("bearing defect", "bearing", 312.7, 0.018),
    ("bearing lower sideband", "bearing", round(312.7 - SHAFT_HZ, 6), 0.007),
    ("bearing upper sideband", "bearing", round(312.7 + SHAFT_HZ, 6), 0.007),
    ("supply spur A", "spur", 6700.0, 0.015),
    ("supply spur B", "spur", 13100.0, 0.010),
)


def write_all(folder: Path) -> list[Path]:
    """Write every demo file into ``folder`` (created if needed); return the paths written."""
    folder.mkdir(parents=True, exist_ok=True)
    write_program(folder / "program_48k.wav")
    _write_audio(folder / "pink_noise_48k.wav", pink_noise(), "PCM_24")
    _write_audio(folder / "log_sweep_48k.wav", log_sweep(), "PCM_16")
    write_vibration(folder)
    return sorted(folder.glob("*"))


def write_program(path: Path) -> Path:
    _write_audio(path, program(), "PCM_16")
    return path


def write_vibration(folder: Path) -> tuple[Path, Path, Path]:
    """The vibration recording as float WAV, its first second as CSV, and the tone list."""
    accel_g = vibration().astype(np.float32)
    wav = folder / "vibration_51k2.wav"
    _write_audio(wav, accel_g, "FLOAT", VIB_RATE_HZ)
    head = accel_g[: int(VIB_CSV_SECONDS * VIB_RATE_HZ)]
    csv = folder / "vibration_51k2.csv"
    outputs.write_csv(csv, head, VIB_RATE_HZ, ["accel_g"])
    manifest = folder / "vibration_51k2.json"
    with outputs.atomic_path(manifest) as tmp:
        tmp.write_text(json.dumps(vibration_manifest(), indent=2) + "\n", encoding="utf-8")
    return wav, csv, manifest


def _write_audio(path: Path, data: np.ndarray, subtype: str, rate_hz: int = AUDIO_RATE_HZ) -> None:
    channels = 1 if data.ndim == 1 else data.shape[1]
    with outputs.SafeWriter(path, rate_hz, channels, subtype=subtype) as writer:
        writer.write(data)


# --- program -----------------------------------------------------------------------------


def program() -> np.ndarray:
    """Bass, chords, kick, snare and hats: 8 bars at 128 BPM, stereo, peak -3 dBFS."""
    rng = np.random.default_rng([SEED, 1])
    beat = round(AUDIO_RATE_HZ * 60.0 / PROGRAM_BPM)
    bar = 4 * beat
    mix = np.zeros((PROGRAM_BARS * bar, 2))
    for index in range(PROGRAM_BARS):
        root, chord = PROGRAM_CHORDS[index % len(PROGRAM_CHORDS)]
        start = index * bar
        for step, interval in enumerate(BASS_PATTERN):
            _add(
                mix,
                start + step * beat // 2,
                0.45 * _bass_note(_midi_hz(root + interval), beat // 2),
            )
        pad = np.sum([_pad_note(_midi_hz(note), bar) for note in chord], axis=0)
        _add(mix, start, 0.06 * pad)
        for b in range(4):
            _add(mix, start + b * beat, 0.9 * _kick())
            _add(mix, start + b * beat + beat // 2, 0.12 * _hat(rng)[:, None] * [0.4, 0.6])
            if b % 2:
                _add(mix, start + b * beat, 0.35 * _snare(rng))
    return mix * (10 ** (PROGRAM_PEAK_DBFS / 20) / np.max(np.abs(mix)))


def _add(mix: np.ndarray, start: int, sound: np.ndarray) -> None:
    """Add a mono (centred) or stereo sound into the mix from frame ``start`` (clipped at end)."""
    sound = sound.reshape(len(sound), -1)
    stop = min(len(mix), start + len(sound))
    mix[start:stop] += sound[: stop - start]


def _midi_hz(note: float) -> float:
    return 440.0 * 2.0 ** ((note - 69) / 12)  # A4 = MIDI 69 = 440 Hz (ISO 16:1975)


def _envelope(frames: int, attack_s: float, decay_s: float) -> np.ndarray:
    t = np.arange(frames) / AUDIO_RATE_HZ
    return np.minimum(t / attack_s, 1.0) * np.exp(-t / decay_s)


def _bass_note(f0_hz: float, frames: int) -> np.ndarray:
    """Band-limited sawtooth (harmonics below 3 kHz, slope 1/k^1.3) with a plucked envelope."""
    phase = 2 * np.pi * f0_hz * np.arange(frames) / AUDIO_RATE_HZ
    harmonics = range(1, int(3000 / f0_hz) + 1)
    tone = sum(np.sin(k * phase) / k**1.3 for k in harmonics)
    gate = np.minimum(1.0, (frames - np.arange(frames)) / (0.01 * AUDIO_RATE_HZ))
    return tone * _envelope(frames, 0.004, 0.18) * gate


def _pad_note(f0_hz: float, frames: int) -> np.ndarray:
    """A soft chord tone, detuned by +-0.15 % between left and right for width."""
    t = np.arange(frames) / AUDIO_RATE_HZ
    swell = np.minimum(t / 0.04, 1.0) * np.minimum(1.0, (t[-1] - t) / 0.15)
    sides = []
    for detune in (0.9985, 1.0015):
        f = f0_hz * detune
        sides.append(
            sum(w * np.sin(2 * np.pi * k * f * t) for k, w in ((1, 1), (2, 0.4), (3, 0.2)))
        )
    return np.stack(sides, axis=1) * swell[:, None]


def _kick() -> np.ndarray:
    frames = int(0.4 * AUDIO_RATE_HZ)
    t = np.arange(frames) / AUDIO_RATE_HZ
    f_hz = 45.0 + 110.0 * np.exp(-t / 0.03)
    return np.sin(2 * np.pi * np.cumsum(f_hz) / AUDIO_RATE_HZ) * _envelope(frames, 0.001, 0.15)


def _snare(rng: np.random.Generator) -> np.ndarray:
    frames = int(0.25 * AUDIO_RATE_HZ)
    sos = signal.butter(2, [1000, 5000], "bandpass", fs=AUDIO_RATE_HZ, output="sos")
    noise = signal.sosfilt(sos, rng.standard_normal(frames))
    body = np.sin(2 * np.pi * 190.0 * np.arange(frames) / AUDIO_RATE_HZ)
    return noise * _envelope(frames, 0.001, 0.07) + 0.5 * body * _envelope(frames, 0.001, 0.04)


def _hat(rng: np.random.Generator) -> np.ndarray:
    frames = int(0.08 * AUDIO_RATE_HZ)
    sos = signal.butter(4, 7000, "highpass", fs=AUDIO_RATE_HZ, output="sos")
    return signal.sosfilt(sos, rng.standard_normal(frames)) * _envelope(frames, 0.0005, 0.02)


# --- test signals ------------------------------------------------------------------------


def pink_noise() -> np.ndarray:
    """Pink (1/f) noise: exact 1/f magnitudes with random phases, 10 Hz to Nyquist.

    The spectrum is built on the FFT grid of the whole file, so the file loops without a seam.
    """
    rng = np.random.default_rng([SEED, 2])
    frames = int(PINK_SECONDS * AUDIO_RATE_HZ)
    f_hz = np.fft.rfftfreq(frames, 1 / AUDIO_RATE_HZ)
    magnitude = np.zeros_like(f_hz)
    band = f_hz >= PINK_LOW_HZ
    magnitude[band] = 1 / np.sqrt(f_hz[band])
    phase = rng.uniform(0, 2 * np.pi, len(f_hz))
    x = np.fft.irfft(magnitude * np.exp(1j * phase), frames)
    return x * (10 ** (PINK_RMS_DBFS / 20) / np.sqrt(np.mean(x**2)))


def log_sweep() -> np.ndarray:
    """Exponential sine sweep, f(t) = f1 (f2/f1)^(t/T) (Farina, AES 108th conv., 2000)."""
    frames = int(SWEEP_SECONDS * AUDIO_RATE_HZ)
    t = np.arange(frames) / AUDIO_RATE_HZ
    rate = SWEEP_SECONDS / np.log(SWEEP_STOP_HZ / SWEEP_START_HZ)
    x = np.sin(2 * np.pi * SWEEP_START_HZ * rate * (np.exp(t / rate) - 1))
    fade = np.ones(frames)
    n_in, n_out = int(SWEEP_FADE_IN_S * AUDIO_RATE_HZ), int(SWEEP_FADE_OUT_S * AUDIO_RATE_HZ)
    fade[:n_in] = 0.5 - 0.5 * np.cos(np.pi * np.arange(n_in) / n_in)
    fade[frames - n_out :] = 0.5 + 0.5 * np.cos(np.pi * np.arange(1, n_out + 1) / n_out)
    return 10 ** (SWEEP_PEAK_DBFS / 20) * x * fade


def vibration() -> np.ndarray:
    """Invented pump-motor accelerometer signal in g: tones of VIB_TONES plus white noise."""
    rng = np.random.default_rng([SEED, 3])
    frames = int(VIB_SECONDS * VIB_RATE_HZ)
    t = np.arange(frames) / VIB_RATE_HZ
    x = VIB_NOISE_RMS_G * rng.standard_normal(frames)
    for _, _, f_hz, amplitude_g in VIB_TONES:
        x += amplitude_g * np.sin(2 * np.pi * f_hz * t + rng.uniform(0, 2 * np.pi))
    return x


def alias_hz(f_hz: float, rate_hz: float) -> float:
    """Where a tone lands after sampling at ``rate_hz`` (folding about multiples of rate/2)."""
    return abs(f_hz - rate_hz * round(f_hz / rate_hz))


def vibration_manifest() -> dict[str, object]:
    """Machine-readable description of the vibration files (tone list for tests and users)."""
    return {
        "description": (
            "Invented demo data: accelerometer on an invented pump motor, captured at 51.2 kHz;"
            " the invented logger's ADC runs at 8 kHz, so the supply spurs alias into its band"
            " unless an anti-alias filter removes them."
        ),
        "files": ["vibration_51k2.wav", "vibration_51k2.csv"],
        "rate_hz": VIB_RATE_HZ,
        "duration_s": {"vibration_51k2.wav": VIB_SECONDS, "vibration_51k2.csv": VIB_CSV_SECONDS},
        "units": "g (1.0 in the file = 1 g)",
        "shaft_hz": SHAFT_HZ,
        "logger_adc_rate_hz": LOGGER_ADC_RATE_HZ,
        "logger_nyquist_hz": LOGGER_ADC_RATE_HZ / 2,
        "noise_rms_g": VIB_NOISE_RMS_G,
        "components": [
            {
                "name": name,
                "kind": kind,
                "freq_hz": f_hz,
                "amplitude_g": amplitude_g,
                "alias_hz_at_logger_rate": round(alias_hz(f_hz, LOGGER_ADC_RATE_HZ), 6),
            }
            for name, kind, f_hz, amplitude_g in VIB_TONES
        ],
    }
