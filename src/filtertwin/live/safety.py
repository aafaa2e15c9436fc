"""Output safety for the live stream: a start-muted level ramp and a hard output ceiling.

Everything a listener hears passes through :class:`OutputSafety` last. It does two things,
in one compiled pass over the block, in place, without allocating:

1. **Level ramp.** The gain starts at 0 (silence) and moves in a straight line towards the
   set level, at a full-scale rate of ``1 / ramp_s`` per second: from silence to 0 dB in
   ``ramp_s`` seconds (1 s by default). Level changes and the fade-out at the end move at
   the same rate, so no change of level ever steps.
2. **Ceiling.** A peak limiter with instant attack and a smooth exponential release keeps
   every sample at or below the ceiling (-1 dBFS by default). The ceiling can be lowered,
   never raised above -1 dBFS and never switched off. Samples that are not finite (NaN,
   infinity) are replaced by silence and counted.

The limiter gain is shared by all channels (linked), so the stereo image does not move when
one channel is limited.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from filtertwin.errors import UserInputError

MAX_CEILING_DBFS = -1.0
"""The highest ceiling allowed: the limiter cannot be set above this, nor switched off."""
MIN_CEILING_DBFS = -60.0
MIN_LEVEL_DB = -60.0
MAX_LEVEL_DB = 12.0

# indices into the state and counter arrays shared with the kernel
_GAIN, _LIMIT = 0, 1
_TARGET, _STEP, _CEILING, _RELEASE = 0, 1, 2, 3
_NONFINITE, _LIMITED_FRAMES = 0, 1


@numba.njit(cache=True)
def _safety_kernel(
    block: np.ndarray, state: np.ndarray, params: np.ndarray, counters: np.ndarray
) -> None:
    """Ramp and limit a (frames, channels) float32 block in place (see module docstring)."""
    frames, channels = block.shape
    gain = state[_GAIN]
    limit = state[_LIMIT]
    target = params[_TARGET]
    step = params[_STEP]
    ceiling = params[_CEILING]
    release = params[_RELEASE]
    for n in range(frames):
        peak = 0.0
        for c in range(channels):
            x = float(block[n, c])
            if not math.isfinite(x):
                block[n, c] = 0.0
                counters[_NONFINITE] += 1
                x = 0.0
            a = abs(x) * gain
            if a > peak:
                peak = a
        limit = 1.0 - (1.0 - limit) * release  # smooth release towards no reduction
        if peak * limit > ceiling:
            limit = ceiling / peak  # instant attack
        if limit < 1.0:
            counters[_LIMITED_FRAMES] += 1
        g = gain * limit
        for c in range(channels):
            y = block[n, c] * g
            if y > ceiling:  # rounding guard: the ceiling is never exceeded
                y = ceiling
            elif y < -ceiling:
                y = -ceiling
            block[n, c] = y
        # the ramp moves after the frame, so the first frame is played at the start gain
        if gain < target:
            gain = min(gain + step, target)
        elif gain > target:
            gain = max(gain - step, target)
        if abs(gain - target) < 1e-6 * step:  # no rounding residue left after the last step
            gain = target
    state[_GAIN] = gain
    state[_LIMIT] = limit


def db_to_gain(db: float) -> float:
    """Linear amplitude gain of a level in dB (20 log10 convention)."""
    return float(10.0 ** (db / 20.0))


def float32_at_or_below(value: float) -> float:
    """The largest float32 number not above ``value``, as a float.

    The limiter compares in float64 and stores float32; clamping to this number guarantees
    that the stored sample is not above the ceiling after rounding.
    """
    single = np.float32(value)
    if float(single) > value:
        single = np.nextafter(single, np.float32(-np.inf))
    return float(single)


class OutputSafety:
    """Start-muted level ramp and hard output ceiling for a live stream.

    Parameters
    ----------
    rate_hz : float
        Sample rate of the stream.
    level_db : float
        Level to ramp up to after the start, in dB (0 dB leaves the signal as it is).
    ceiling_dbfs : float
        Highest output peak, in dBFS; at most :data:`MAX_CEILING_DBFS` (-1 dBFS).
    ramp_s : float
        Time for the gain to move from silence to 0 dB (and back at the end).
    release_s : float
        Time constant of the limiter's release (recovery after a peak).

    Raises
    ------
    UserInputError
        If a setting is outside its range (the message names the setting and the range).

    Examples
    --------
    >>> safety = OutputSafety(48000.0)
    >>> block = np.ones((4, 2), dtype=np.float32)
    >>> safety.process(block)
    >>> float(block[0, 0])  # the output starts muted
    0.0
    """

    def __init__(
        self,
        rate_hz: float,
        level_db: float = 0.0,
        ceiling_dbfs: float = MAX_CEILING_DBFS,
        ramp_s: float = 1.0,
        release_s: float = 0.1,
    ) -> None:
        if not rate_hz > 0:
            raise UserInputError(f"sample rate must be > 0 Hz, got {rate_hz}")
        if not 0.001 <= ramp_s <= 60.0:
            raise UserInputError(f"level ramp time must be 0.001 to 60 s, got {ramp_s} s")
        if not 0.001 <= release_s <= 10.0:
            raise UserInputError(f"limiter release must be 0.001 to 10 s, got {release_s} s")
        self.rate_hz = float(rate_hz)
        self._state = np.array([0.0, 1.0])  # gain, limiter gain
        self._params = np.array(
            [0.0, 1.0 / (ramp_s * rate_hz), 1.0, math.exp(-1.0 / (release_s * rate_hz))]
        )
        self._counters = np.zeros(2, dtype=np.int64)
        self._level_db = 0.0
        self._ceiling_dbfs = MAX_CEILING_DBFS
        self.set_ceiling(ceiling_dbfs)
        self.set_level(level_db)

    @property
    def level_db(self) -> float:
        """The level the gain moves to while not fading out, in dB."""
        return self._level_db

    @property
    def ceiling_dbfs(self) -> float:
        """The output ceiling in dBFS."""
        return self._ceiling_dbfs

    @property
    def gain(self) -> float:
        """The level-ramp gain reached at the end of the last block (linear)."""
        return float(self._state[_GAIN])

    @property
    def limiter_gain(self) -> float:
        """The ceiling limiter's gain at the end of the last block (1.0: not limiting)."""
        return float(self._state[_LIMIT])

    @property
    def nonfinite_samples(self) -> int:
        """How many NaN or infinite input samples were replaced by silence."""
        return int(self._counters[_NONFINITE])

    @property
    def limited_frames(self) -> int:
        """How many frames the limiter reduced."""
        return int(self._counters[_LIMITED_FRAMES])

    def set_level(self, level_db: float) -> None:
        """Set the level to ramp to, in dB (-60 to +12 dB; the ceiling still applies).

        Raises
        ------
        UserInputError
            If the level is outside -60 to +12 dB.
        """
        if not MIN_LEVEL_DB <= level_db <= MAX_LEVEL_DB:
            raise UserInputError(
                f"output level must be {MIN_LEVEL_DB:g} to {MAX_LEVEL_DB:+g} dB, got {level_db} dB"
            )
        self._level_db = float(level_db)
        self._params[_TARGET] = db_to_gain(level_db)

    def set_ceiling(self, ceiling_dbfs: float) -> None:
        """Set the output ceiling, in dBFS: -60 to -1 dBFS; it cannot be raised above -1.

        Raises
        ------
        UserInputError
            If the ceiling is above -1 dBFS or below -60 dBFS.
        """
        if not MIN_CEILING_DBFS <= ceiling_dbfs <= MAX_CEILING_DBFS:
            raise UserInputError(
                f"output ceiling must be {MIN_CEILING_DBFS:g} to {MAX_CEILING_DBFS:g} dBFS "
                f"(it protects ears and speakers and cannot be raised or switched off), "
                f"got {ceiling_dbfs} dBFS"
            )
        self._ceiling_dbfs = float(ceiling_dbfs)
        self._params[_CEILING] = float32_at_or_below(db_to_gain(ceiling_dbfs))

    def fade_out(self) -> None:
        """Ramp the gain down to silence (at the ramp rate), e.g. before stopping."""
        self._params[_TARGET] = 0.0

    def is_silent(self) -> bool:
        """True once a fade-out has reached silence."""
        return self._params[_TARGET] == 0.0 and self._state[_GAIN] == 0.0

    def process(self, block: np.ndarray) -> None:
        """Apply the ramp and the ceiling to a (frames, channels) float32 block, in place.

        Safe to call from an audio callback: it allocates nothing.
        """
        _safety_kernel(block, self._state, self._params, self._counters)


def warm_up() -> None:
    """Compile the kernel now (before a stream starts), so no callback waits for it."""
    OutputSafety(48000.0).process(np.zeros((2, 2), dtype=np.float32))
