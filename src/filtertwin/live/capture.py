"""What an ideal ADC would capture, played back as a DAC reconstructs it (``--adc-rate``).

For a recording sampled faster than the ADC (a sensor recording, say), the read-ahead thread
makes a second version of every chain's output and of the dry input: the signal sampled at
the ADC's rate with no filtering of its own, so every component above the ADC's Nyquist
frequency lands at ``|f - k fs|`` (Oppenheim & Schafer 4.2), then resampled from the ADC's
rate to the stream's rate with the band-limited low-pass of
:class:`~filtertwin.digital.resample.StreamResampler` (what a DAC plays back). The listener
switches between the signal and its capture with a crossfade, so the capture sources are
aligned in time with the direct ones.

The sampler is the one :func:`filtertwin.checks.alias.capture` uses, run block by block with
state: for a whole-number ratio of the recording's rate to the ADC's, every k-th sample; else
a Kaiser-windowed sinc interpolation at the ADC's instants (its cut-off is the recording's
Nyquist frequency, so nothing above the ADC's Nyquist frequency is removed).

References
----------
A. V. Oppenheim, R. W. Schafer, *Discrete-Time Signal Processing*, 3rd ed., 4.2 (sampling
and aliasing) and 4.3 (band-limited reconstruction).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from filtertwin.checks.alias import interpolator_taps
from filtertwin.circuit.design import Design
from filtertwin.digital.resample import MAX_FACTOR, StreamResampler, ratio
from filtertwin.errors import UserInputError

SEARCH_HZ = 2000
"""How far from the ADC rate given a rate with simple factors is looked for (suggestion)."""


@dataclass(frozen=True)
class CapturePlan:
    """Rates and factors of the ADC capture.

    Attributes
    ----------
    recording_rate_hz, stream_rate_hz : float
    adc_rate_hz : float
        The rate sampled at: ``recording_rate_hz * sample_up / sample_down`` (the rate given,
        to the whole hertz).
    sample_up, sample_down : int
        Recording rate to ADC rate, in lowest terms.
    dac_up, dac_down : int
        ADC rate to stream rate, in lowest terms.
    """

    recording_rate_hz: float
    stream_rate_hz: float
    adc_rate_hz: float
    sample_up: int
    sample_down: int
    dac_up: int
    dac_down: int

    @property
    def label(self) -> str:
        """For the status line, e.g. "ADC 8 kHz"."""
        return f"ADC {self.adc_rate_hz / 1000:g} kHz"


def _factors(from_hz: float, to_hz: float) -> tuple[int, int] | None:
    """:func:`~filtertwin.digital.resample.ratio`, or None where it refuses the rates."""
    try:
        return ratio(from_hz, to_hz)
    except UserInputError:
        return None


def _simple_rate(adc_rate_hz: float, recording_rate_hz: float, stream_rate_hz: float) -> int:
    """The whole-hertz ADC rate nearest the one given whose factors stay small (0: none)."""
    start = round(adc_rate_hz)
    for step in range(SEARCH_HZ):
        for rate in (start - step, start + step):
            if 0 < rate < recording_rate_hz and _factors(recording_rate_hz, rate) is not None:
                if _factors(rate, stream_rate_hz) is not None:
                    return rate
    return 0


def check_adc_rate(adc_rate_hz: float, recording_rate_hz: float, source: str) -> None:
    """Refuse an ADC rate that is not below the recording's rate.

    Raises
    ------
    UserInputError
        One line naming the recording and its rate.
    """
    if not round(adc_rate_hz) < round(recording_rate_hz):
        raise UserInputError(
            f"--adc-rate {adc_rate_hz:g} Hz is not below the rate of {source} "
            f"({recording_rate_hz:g} Hz), so nothing would fold; give an ADC rate below it"
        )


def plan_capture(
    adc_rate_hz: float, recording_rate_hz: float, stream_rate_hz: float, source: str
) -> CapturePlan:
    """Check the ADC rate and find the resampling factors.

    Parameters
    ----------
    adc_rate_hz : float
        The ADC's rate given (``--adc-rate``).
    recording_rate_hz, stream_rate_hz : float
        The recording's and the stream's rates.
    source : str
        The recording (for messages).

    Raises
    ------
    UserInputError
        If the ADC rate is not below the recording's rate, or the rates need resampling
        factors above 1000 (naming a rate near it that works).
    """
    check_adc_rate(adc_rate_hz, recording_rate_hz, source)
    sample = _factors(recording_rate_hz, adc_rate_hz)
    dac = _factors(adc_rate_hz, stream_rate_hz)
    if sample is None or dac is None:
        near = _simple_rate(adc_rate_hz, recording_rate_hz, stream_rate_hz)
        hint = f"e.g. --adc-rate {near}" if near else "use a rate in whole kilohertz"
        raise UserInputError(
            f"--adc-rate {adc_rate_hz:g} Hz is no simple fraction of the recording's "
            f"{recording_rate_hz:g} Hz and the stream's {stream_rate_hz:g} Hz (resampling "
            f"factors above {MAX_FACTOR}); {hint}"
        )
    return CapturePlan(
        recording_rate_hz=float(recording_rate_hz),
        stream_rate_hz=float(stream_rate_hz),
        adc_rate_hz=round(recording_rate_hz) * sample[0] / sample[1],
        sample_up=sample[0],
        sample_down=sample[1],
        dac_up=dac[0],
        dac_down=dac[1],
    )


CAPTURE_BITS = 16
"""Converter resolution the live capture's stopband is judged at (as `alias` by default)."""


def stopband_notes(
    label: str, design: Design, recording_rate_hz: float, adc_rate_hz: float, factor: int = 1
) -> list[str]:
    """How well a candidate's twin, running at ``factor`` times the recording's rate, follows
    the analog model over the frequencies the ADC folds into its band.

    One line per low-pass or band-pass filter. The rule is :mod:`filtertwin.checks.stopband`'s
    (within 1 dB down to a 16-bit converter's 98 dB plus 10 dB); where the twin misses it,
    the line says by how much, where, and which oversampling would follow the circuit
    (``filtertwin alias`` runs the twin there).
    """
    from filtertwin.checks.alias import ideal_dynamic_range_db
    from filtertwin.checks.droop import DEFAULT_MAX_DROOP_DB, band_within_droop
    from filtertwin.checks.stopband import plan_oversampling

    required = ideal_dynamic_range_db(CAPTURE_BITS)
    notes = []
    for filt in design.filters:
        if filt.response == "highpass":
            continue
        band = band_within_droop(filt, DEFAULT_MAX_DROOP_DB, adc_rate_hz / 2)
        args = (design, filt, recording_rate_hz, adc_rate_hz, band, required)
        try:
            now = plan_oversampling(*args, factors=(factor,))
        except ValueError:
            continue  # a stage above this rate's Nyquist frequency: the twin refuses it anyway
        where = f"{label} '{filt.name}' twin at {factor}x the recording's rate"
        if now.reached:
            notes.append(
                f"{where}: within {now.stopband_db:.2f} dB of the circuit over the folding "
                f"frequencies down to -{now.level_db:.0f} dB"
            )
            continue
        need = plan_oversampling(*args)
        fix = (
            f"{need.factor}x would follow it (filtertwin alias runs it there)"
            if need.reached
            else "no factor up to 32x follows it"
        )
        notes.append(
            f"{where}: {now.stopband_db:.1f} dB off the circuit at {now.stopband_at_hz:.5g} Hz "
            f"in the folding band, so its capture there is not the circuit's; {fix}"
        )
    return notes


def sampler_taps(up: int) -> np.ndarray:
    """The ADC sampler's FIR at ``up`` times the recording's rate.

    ``[1.0]`` for ``up == 1`` (every k-th sample); otherwise the band-limited interpolator
    :func:`filtertwin.checks.alias.interpolator_taps` that
    :func:`filtertwin.checks.alias.capture` uses.
    """
    return np.ones(1) if up == 1 else interpolator_taps(up)


def resampler(up: int, down: int, channels: int) -> StreamResampler | None:
    """A :class:`StreamResampler` for ``up/down``, or None when the rate stays."""
    return None if up == down else StreamResampler(up, down, channels)


def lag_s(stage: StreamResampler | None, input_rate_hz: float) -> float:
    """Seconds a resampler's output lags its input (0 without one)."""
    return 0.0 if stage is None else stage.lag_frames / input_rate_hz


class AdcCapture:
    """Samples blocks as the ADC would and resamples the capture to the stream rate.

    Parameters
    ----------
    plan : CapturePlan
        Rates and factors.
    channels : int
        Channels of every block (every source's channels side by side).
    direct_lag_s : float
        How far the direct signal (resampled to the stream rate the usual way) lags the
        recording; the earlier of the two outputs is delayed by whole stream frames so that
        both leave :meth:`process` together and aligned.
    """

    def __init__(self, plan: CapturePlan, channels: int, direct_lag_s: float = 0.0) -> None:
        self.plan = plan
        self.channels = channels
        self.sampler = StreamResampler(
            plan.sample_up, plan.sample_down, channels, taps=sampler_taps(plan.sample_up)
        )
        self.dac = resampler(plan.dac_up, plan.dac_down, channels)
        own_lag_s = lag_s(self.sampler, plan.recording_rate_hz) + lag_s(self.dac, plan.adc_rate_hz)
        self.delay_frames = round((own_lag_s - direct_lag_s) * plan.stream_rate_hz)
        """Frames the direct signal is held back (negative: the capture is)."""
        self._direct = np.zeros((max(self.delay_frames, 0), channels))
        self._captured = np.zeros((max(-self.delay_frames, 0), channels))

    def capture(self, block: np.ndarray) -> np.ndarray:
        """``(frames, channels)`` at the recording's rate -> the capture at the stream rate
        (every frame whose inputs have all arrived; not aligned)."""
        taken = self.sampler.process(block)
        return taken if self.dac is None else self.dac.process(taken)

    def process(self, direct: np.ndarray, block: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Capture a block and hand out as many aligned frames of both signals as exist.

        Parameters
        ----------
        direct : numpy.ndarray
            ``(m, channels)``: the block resampled to the stream rate the usual way.
        block : numpy.ndarray
            ``(frames, channels)``: the same block at the recording's rate.

        Returns
        -------
        direct, captured : numpy.ndarray
            ``(n, channels)`` each, at the stream rate, aligned in time.
        """
        direct = np.concatenate([self._direct, direct])
        captured = np.concatenate([self._captured, self.capture(block)])
        n = min(len(direct), len(captured))
        self._direct, self._captured = direct[n:], captured[n:]
        return direct[:n], captured[:n]


def source_gains(gains: np.ndarray, capture_on: bool) -> np.ndarray:
    """Gains of the sources with captures, from the gains of the chains and the dry input.

    The sources are the ``n`` chains, their ``n`` captures, the capture of the dry input and
    the dry input; ``gains`` has ``n + 1`` values (the dry input last). With the capture on,
    each chain's gain moves to its capture, the dry input's to the dry capture.
    """
    n = len(gains) - 1
    full = np.zeros(2 * n + 2)
    if capture_on:
        full[n : 2 * n + 1] = gains
    else:
        full[:n] = gains[:n]
        full[-1] = gains[-1]
    return full
