"""Verdicts: one PASS or FAIL per check, the same in the terminal, the report and the exit status.

Every command that judges something builds a list of :class:`Verdict` (pure data), prints
:func:`lines` of it, puts :func:`rows` of it in its report, and returns :func:`exit_status`:
0 when every verdict passed, 1 when any failed (the README's table lists each command's
checks). A command never decides its exit status any other way.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from filtertwin.digital.render import RenderResult
    from filtertwin.digital.twin import Twin

EXIT_PASS = 0
EXIT_FAIL = 1


@dataclass(frozen=True)
class Verdict:
    """One check of one subject.

    Attributes
    ----------
    check : str
        What was checked, in plain words ("twin fidelity", "amplifier swing", "yield").
    subject : str
        What it was checked on (a filter's name, a file name, "design").
    passed : bool
        PASS when True.
    result : str
        The measured figure, in words ("0.012 dB at 19.9 kHz", "never reached").
    limit : str
        What the figure was held against ("tolerance 0.1 dB, 1 deg"); empty when PASS needs
        no figure (e.g. "never reached").
    """

    check: str
    subject: str
    passed: bool
    result: str
    limit: str = ""

    @property
    def word(self) -> str:
        """``"PASS"`` or ``"FAIL"``."""
        return "PASS" if self.passed else "FAIL"

    def line(self) -> str:
        """The terminal line: ``check: subject PASS|FAIL (result; limit)``."""
        detail = "; ".join(t for t in (self.result, self.limit) if t)
        return f"{self.check}: {self.subject} {self.word}" + (f" ({detail})" if detail else "")


def overall(verdicts: Iterable[Verdict]) -> str:
    """``"PASS"`` when every verdict passed (or there are none), else ``"FAIL"``."""
    return "PASS" if all(v.passed for v in verdicts) else "FAIL"


def exit_status(verdicts: Iterable[Verdict]) -> int:
    """0 when every verdict passed, 1 when any failed."""
    return EXIT_PASS if overall(verdicts) == "PASS" else EXIT_FAIL


def lines(verdicts: Sequence[Verdict]) -> list[str]:
    """One line per verdict, then ``verdict: PASS`` or ``verdict: FAIL (n of m checks ...)``."""
    out = [v.line() for v in verdicts]
    failed = [v for v in verdicts if not v.passed]
    if failed:
        names = ", ".join(f"{v.check} of {v.subject}" for v in failed)
        out.append(f"verdict: FAIL ({len(failed)} of {len(verdicts)} failed: {names})")
    else:
        out.append(f"verdict: PASS ({len(verdicts)} check{'s' * (len(verdicts) != 1)})")
    return out


def rows(verdicts: Iterable[Verdict]) -> list[tuple[str, str, str, str]]:
    """Report table rows: (check, subject, result and limit, PASS|FAIL)."""
    return [
        (v.check, v.subject, "; ".join(t for t in (v.result, v.limit) if t), v.word)
        for v in verdicts
    ]


def render_verdicts(result: RenderResult, twin: Twin) -> list[Verdict]:
    """The checks of a render: each filter's twin fidelity (resampling filters included),
    amplifier swing and slew rate, and any PCM output file that clipped at full scale."""
    from filtertwin.circuit import units
    from filtertwin.digital.twin import FIDELITY_TOL_DB, FIDELITY_TOL_DEG

    out = []
    limit = f"tolerance {FIDELITY_TOL_DB:g} dB, {FIDELITY_TOL_DEG:g} deg"
    for ft in twin.filters:
        fid = ft.fidelity
        lo, hi = fid.band_hz
        measured = (
            f"{fid.max_db:.3f} dB (at {units.format_si(fid.at_hz, 'Hz')}), {fid.max_deg:.2f} deg,"
            f" {units.format_si(lo, 'Hz', 3)} to {units.format_si(hi, 'Hz', 3)}"
        )
        ok = fid.within(FIDELITY_TOL_DB, FIDELITY_TOL_DEG)
        out.append(Verdict("twin fidelity", f"filter '{ft.name}'", ok, measured, limit))
    for ft in twin.filters:
        clips = [c for c in result.clips if c.filter == ft.name]
        text = "; ".join(f"stage {c.stage}: {c.samples} samples limited" for c in clips)
        out.append(
            Verdict(
                "amplifier swing", f"filter '{ft.name}'", not clips, text or "never reached",
                "limit: the amplifier's output swing" if clips else "",
            )
        )  # fmt: skip
        slews = [c for c in result.slews if c.filter == ft.name]
        text = "; ".join(f"stage {c.stage}: {c.samples} samples slewed" for c in slews)
        out.append(
            Verdict(
                "amplifier slew rate", f"filter '{ft.name}'", not slews, text or "never reached",
                f"limit: the amplifier's slew rate, counted at {twin.rate_hz / 1e3:g} kHz"
                if slews else "",
            )
        )  # fmt: skip
    for f in result.files:
        if f.over_full_scale and f.subtype and f.subtype.startswith("PCM"):
            out.append(Verdict(
                "file full scale", f.path.name, False,
                f"{f.over_full_scale} samples beyond full scale clipped in the file",
                "write float (--subtype float) or lower the input level",
            ))  # fmt: skip
    return out


DEFAULT_YIELD_TARGET = 0.9
"""Yield the tolerance check asks for by default: 90 % of builds inside every filter's mask
(common practice for a hand-built or small-batch filter; set your own with --min-yield)."""


def tolerance_verdicts(yield_fraction: float, builds: int, target: float) -> list[Verdict]:
    """The tolerance check: the fraction of builds inside every mask against ``target``."""
    return [
        Verdict(
            "yield", "design", yield_fraction >= target,
            f"{100 * yield_fraction:.1f} % of {builds} builds inside every filter's mask",
            f"target {100 * target:g} %, --min-yield",
        )
    ]  # fmt: skip
