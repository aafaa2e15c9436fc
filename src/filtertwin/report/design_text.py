"""A Design (and optionally its twin) as a readable table, a JSON-ready dict and a BOM."""

from __future__ import annotations

import math
from typing import Any

from filtertwin import units
from filtertwin.design import Design, Filter, Stage, StopbandFloor
from filtertwin.twin import (
    FIDELITY_TOL_DB,
    FIDELITY_TOL_DEG,
    OVERSAMPLING_FACTORS,
    FilterTwin,
    Twin,
)

TOPOLOGY_WORDS = {"unity": "unity-gain", "equal": "equal-component", "gain": "with gain"}


def _pct(built: float, target: float) -> float:
    return 100.0 * (built / target - 1.0)


def _q(q: float) -> str:
    return "  -   " if math.isnan(q) else f"{q:6.3f}"


def _parts_text(stage: Stage) -> str:
    out = []
    for name, value in stage.circuit.parts().items():
        kind = "R" if name.startswith("R") else "C"
        out.append(f"{name}={units.format_letter_code(value, kind)}")
    return " ".join(out)


def _describe_filter(f: Filter) -> str:
    s = f.spec
    if s.kind == "built":
        text = "as built from its parts"
        if f.resembles is not None:
            text += f"; nearest standard alignment: {resemblance(f)}"
        return text
    if s.kind == "sections":
        return f"explicit sections, {TOPOLOGY_WORDS[s.topology]}"
    corner = " to ".join(units.format_si(c, "Hz", 4) for c in s.corner_hz)
    extra = ""
    if s.alignment == "chebyshev":
        extra = f" {s.ripple_db:g} dB ripple"
    elif s.alignment == "bessel":
        extra = f" ({s.bessel_norm}-normalised)"
    name = (s.alignment or "").replace("-", " ").title().replace(" ", "-")
    return f"{name}{extra}, order {s.order}, corner {corner}, {TOPOLOGY_WORDS[s.topology]}"


def resemblance(f: Filter) -> str:
    """The nearest standard alignment of an as-built filter, with its corner in Hz."""
    m = f.resembles
    assert m is not None
    corner = m.corner_scale if f.response == "lowpass" else 1.0 / m.corner_scale
    name = m.description.split(", corner")[0]
    return f"{name} at {units.format_si(corner, 'Hz', 4)} (distance {m.distance:.3f}, 0 = exact)"


def design_table(design: Design, twin: Twin | None = None) -> str:
    """The per-filter stage table an engineer reads before building."""
    lines = [f"{design.title}"]
    amp = design.amplifier
    lines.append(
        f"amplifier: {amp.description}, swing +/-{amp.swing_v:g} V, open-loop output "
        f"resistance {amp.output_resistance_ohm:g} ohm"
        if amp
        else "amplifier: ideal"
    )
    sp = design.spec.parts
    lines.append(
        f"parts: resistors {sp.resistor_series} {100 * sp.resistor_tolerance:g} %, "
        f"capacitors {sp.capacitor_series} {100 * sp.capacitor_tolerance:g} %; "
        f"full scale {design.spec.full_scale_v:g} V"
    )
    twins = {t.name: t for t in twin.filters} if twin else {}
    for f in design.filters:
        lines.append("")
        pol = ", polarity inverted" if f.polarity < 0 else ""
        gain_db = f.passband_db
        lines.append(
            f"filter '{f.name}' ({f.response}{pol}): {_describe_filter(f)}; "
            f"passband gain {gain_db:+.2f} dB"
        )
        lines.append(
            "  st  type      topology          target f0    Q       built f0     Q      "
            " df0 %   dQ %   K      peak dB  parts"
        )
        for s in f.stages:
            lines.append(_stage_line(s))
        floor = f.stopband_floor()
        if floor is not None:
            lines.append(_floor_line(floor))
        if twin is not None and f.name in twins:
            lines.append(fidelity_line(twins[f.name], twin))
    if design.warnings:
        lines.append("")
        lines.append("warnings:")
        lines += [f"  ! {w}" for w in design.warnings]
    return "\n".join(lines)


def _floor_line(floor: StopbandFloor) -> str:
    return (
        f"  stopband floor {floor.level_db:.1f} dB re passband at "
        f"{units.format_si(floor.at_hz, 'Hz', 4)} (the input reaches the output around the "
        f"amplifiers through their output resistance), rising to {floor.rises_to_db:.1f} dB above"
    )


def _stage_line(s: Stage) -> str:
    c = s.circuit
    kind = ("LP" if c.response == "lowpass" else "HP") + str(c.order)
    topo = TOPOLOGY_WORDS[c.topology]
    b = s.built
    if s.target is not None:
        t_f0 = units.format_si(s.target.f0_hz, "Hz", 4)
        t_q = _q(s.target.q)
        df0 = f"{_pct(b.f0_hz, s.target.f0_hz):+6.2f}"
        dq = "   -  " if math.isnan(s.target.q) else f"{_pct(b.q, s.target.q):+6.2f}"
    else:
        t_f0, t_q, df0, dq = "(given)", "      ", "      ", "      "
    return (
        f"  {s.index:<3d} {kind:<9s} {topo:<17s} {t_f0:>11s} {t_q}  "
        f"{units.format_si(b.f0_hz, 'Hz', 4):>11s} {_q(b.q)}  {df0} {dq}  "
        f"{s.ideal.gain:5.3f}  {s.peak_gain_db:+6.2f}   {_parts_text(s)}"
    )


def fidelity_line(ft: FilterTwin, twin: Twin) -> str:
    """One filter's fidelity, as the terminal and the design table show it (two spaces in),
    with what to do when it is outside the tolerance on further lines."""
    fid = ft.fidelity
    lo, hi = fid.band_hz
    over = (
        f" (oversampled {twin.oversampling}x, {twin.resampling_words()})"
        if twin.oversampling > 1
        else ""
    )
    stop = (
        f"; stopband error {fid.stopband_error_db:.1f} dB re peak"
        if fid.stopband_error_db is not None
        else ""
    )
    return (
        f"  twin at {units.format_si(ft.rate_hz, 'Hz', 4)}{over}, {units.format_si(lo, 'Hz', 3)} "
        f"to {units.format_si(hi, 'Hz', 3)}: within {fid.max_db:.3f} dB (at "
        f"{units.format_si(fid.at_hz, 'Hz', 4)}) and {fid.max_deg:.2f} deg (at "
        f"{units.format_si(fid.at_deg_hz, 'Hz', 4)}) of the analog model{stop}"
        + _fidelity_hint(ft, twin)
        + (f"\n    {ft.slew_note}" if ft.slew_note else "")
    )


def _fidelity_hint(ft: FilterTwin, twin: Twin) -> str:
    """What to do when the twin is further from the analog model than the tolerance: blame
    the resampling filters when the sections alone are within it."""
    fid = ft.fidelity
    if fid.within(FIDELITY_TOL_DB, FIDELITY_TOL_DEG):
        return ""
    over = f"\n    (over {FIDELITY_TOL_DB:g} dB / {FIDELITY_TOL_DEG:g} deg"
    sections_ok = fid.sections_db <= FIDELITY_TOL_DB and fid.sections_deg <= FIDELITY_TOL_DEG
    if twin.oversampling > 1 and sections_ok:
        if twin.resampling == "causal":
            return (
                f"{over}: the sections alone are within it; the causal resampling filters "
                "shift the phase near the top of the band; --resampling linear keeps it)"
            )
        return (
            f"{over}: the sections alone are within it; the loss is the resampling filters, "
            f"{fid.resampling_db:.3f} dB in the band)"
        )
    if twin.oversampling < OVERSAMPLING_FACTORS[-1]:
        return (
            f"{over}: the bilinear transform compresses frequencies near Nyquist; "
            "--oversample auto runs the twin at a higher rate)"
        )
    return (
        f"{over} even at {twin.oversampling}x, the sections alone "
        f"{fid.sections_db:.3f} dB / {fid.sections_deg:.2f} deg, largest at "
        f"{units.format_si(fid.at_hz, 'Hz', 4)}: a skirt steeper than the twin follows there)"
    )


def _model_dict(m, gain: float) -> dict[str, Any]:
    return {
        "f0_hz": m.f0_hz,
        "q": None if math.isnan(m.q) else m.q,
        "gain": gain,
        "extra_pole_hz": m.extra_pole_hz,
    }


def design_dict(design: Design, twin: Twin | None = None) -> dict[str, Any]:
    """The design in SI units for scripts (see the README for the schema)."""
    amp = design.amplifier
    twins = {t.name: t for t in twin.filters} if twin else {}
    out: dict[str, Any] = {
        "title": design.title,
        "source": design.spec.source,
        "full_scale_v": design.spec.full_scale_v,
        "amplifier": None
        if amp is None
        else {
            "description": amp.description,
            "gbw_hz": amp.gbw_hz,
            "swing_v": amp.swing_v,
            "slew_v_per_s": amp.slew_v_per_s,
            "noise_v_per_rthz": amp.noise_v_per_rthz,
            "noise_a_per_rthz": amp.noise_a_per_rthz,
            "open_loop_gain": amp.open_loop_gain,
            "output_resistance_ohm": amp.output_resistance_ohm,
        },
        "filters": [],
        "warnings": [
            {"filter": w.filter, "stage": w.stage, "message": w.message} for w in design.warnings
        ],
    }
    for f in design.filters:
        entry: dict[str, Any] = {
            "name": f.name,
            "response": f.response,
            "polarity": f.polarity,
            "description": _describe_filter(f),
            "passband_gain": f.passband_gain,
            "resembles": None
            if f.resembles is None
            else {
                "description": resemblance(f),
                "alignment": f.resembles.alignment,
                "order": f.resembles.order,
                "distance": f.resembles.distance,
            },
            "stages": [_stage_dict(s) for s in f.stages],
            "stopband_floor": _floor_dict(f.stopband_floor()),
        }
        if f.name in twins and twin is not None:
            ft = twins[f.name]
            fid = ft.fidelity
            entry["twin"] = {
                "rate_hz": ft.rate_hz,
                "input_rate_hz": twin.input_rate_hz,
                "oversampling": twin.oversampling,
                "resampling": twin.resampling if twin.oversampling > 1 else None,
                "sos": ft.sos.tolist(),
                "stage_of_section": list(ft.stage_of_section),
                "fidelity": {
                    "max_db": fid.max_db,
                    "max_deg": fid.max_deg,
                    "at_hz": fid.at_hz,
                    "at_deg_hz": fid.at_deg_hz,
                    "band_hz": list(fid.band_hz),
                    "stopband_error_db": fid.stopband_error_db,
                    "sections_db": fid.sections_db,
                    "sections_deg": fid.sections_deg,
                    "resampling_db": fid.resampling_db,
                },
            }
        out["filters"].append(entry)
    return out


def _floor_dict(floor: StopbandFloor | None) -> dict[str, float] | None:
    if floor is None:
        return None
    return {"level_db": floor.level_db, "at_hz": floor.at_hz, "rises_to_db": floor.rises_to_db}


def _stage_dict(s: Stage) -> dict[str, Any]:
    c = s.circuit
    d: dict[str, Any] = {
        "index": s.index,
        "order": c.order,
        "response": c.response,
        "topology": c.topology,
        "target": None
        if s.target is None
        else {
            "f0_hz": s.target.f0_hz,
            "q": None if math.isnan(s.target.q) else s.target.q,
            "gain": s.target.gain,
        },
        "built": _model_dict(s.built, s.ideal.gain),
        "ideal_amplifier": _model_dict(s.ideal, s.ideal.gain),
        "peak_gain_db": s.peak_gain_db,
        "clip_input_dbfs": s.clip_input_dbfs,
        "parts": c.parts(),
    }
    if s.target is not None:
        d["error_pct"] = {
            "f0": _pct(s.built.f0_hz, s.target.f0_hz),
            "q": None if math.isnan(s.target.q) else _pct(s.built.q, s.target.q),
            "gain": _pct(s.ideal.gain, s.target.gain),
        }
    return d


BOM_COLUMNS = ("designator", "value", "value_si", "series", "tolerance", "filter", "stage", "role")

_ROLES = {
    ("lowpass", "R1"): "input resistor",
    ("lowpass", "R2"): "resistor into amplifier",
    ("lowpass", "C1"): "feedback capacitor",
    ("lowpass", "C2"): "capacitor to ground",
    ("highpass", "C1"): "input capacitor",
    ("highpass", "C2"): "capacitor into amplifier",
    ("highpass", "R1"): "feedback resistor",
    ("highpass", "R2"): "resistor to ground",
}


def bom_rows(design: Design) -> list[dict[str, str]]:
    """One row per part: designator (filter-stage-part), value, series, tolerance, role."""
    sp = design.spec.parts
    rows = []
    for fi, f in enumerate(design.filters, start=1):
        for s in f.stages:
            for name, value in s.circuit.parts().items():
                resistor = name.startswith("R")
                if name in ("RF", "RG"):
                    role = "gain: feedback resistor" if name == "RF" else "gain: resistor to ground"
                    series = sp.gain_series
                elif s.circuit.order == 1:
                    role = "RC network " + ("resistor" if resistor else "capacitor")
                    series = sp.resistor_series if resistor else sp.capacitor_series
                else:
                    role = _ROLES[(s.circuit.response, name)]
                    series = sp.resistor_series if resistor else sp.capacitor_series
                tol = sp.resistor_tolerance if resistor else sp.capacitor_tolerance
                if f.spec.kind == "built":
                    series = "as given"
                rows.append(
                    {
                        "designator": f"{fi}.{s.index}.{name}",
                        "value": units.format_letter_code(value, "R" if resistor else "C"),
                        "value_si": f"{value:.6g}",
                        "series": series,
                        "tolerance": f"{100 * tol:g}%",
                        "filter": f.name,
                        "stage": str(s.index),
                        "role": role,
                    }
                )
    return rows
