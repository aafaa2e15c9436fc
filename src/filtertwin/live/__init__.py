"""Live listening: output safety, the selection mixer, loudness matching, blind trials,
key commands and audio devices.

Modules (import the one you need; none imports sounddevice at import time):

- ``safety``: start-muted level ramp and hard output ceiling (compiled, in place).
- ``mixer``: which candidate, way or the dry input is heard, with equal-gain crossfades.
- ``loudness``: ITU-R BS.1770-4 integrated loudness, to level-match candidates.
- ``blind``: ABX and blind preference trials, their log and exact binomial score.
- ``keys``: key table, timed command scripts and the terminal key reader.
- ``devices``: listing and choosing sounddevice devices, with one-line errors.

``filtertwin listen`` is built from them with:

- ``candidates``, ``routing``, ``matching``: the designs as candidates and ways, where each
  way is heard (stereo mix or one channel pair per way), level matching.
- ``stream`` (audio callback, read-ahead thread), ``ring``: the real-time path (rate changes
  come from ``filtertwin.digital.resample``).
- ``session``, ``edits``, ``chains``: what commands do (the session API), live part and
  corner edits with undo and redo, crossfading rebuilt chains in through a warm spare.
- ``watchdog``: noticing a stream whose audio server quit, and closing without waiting on it.
- ``status``, ``console``, ``player``: status line and summary, the control loop, assembly.
"""
