"""A Design (and optionally its twin) as a readable table, a JSON-ready dict and a BOM."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from filtertwin.circuit import units
from filtertwin.circuit.design import Design, Filter, Stage, StopbandFloor, lowpass_sections
from filtertwin.circuit.noise import DesignNoise, NoiseFigures
from filtertwin.digital.twin import (
    FIDELITY_TOL_DB,
    FIDELITY_TOL_DEG,
    OVERSAMPLING_FACTORS,
    FilterTwin,
    Twin,
)

SMALL_TWIN_ERROR_DB = -80.0
"""A twin difference at most this far below the peak gain (the tolerance's 0.1 dB on a
response 40 dB down is -78.7 dB) is called small in the fidelity hint."""
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


FAR_DISTANCE = 0.5
"""A match further than this (RMS of relative f0 and Q errors) resembles no alignment."""


def resemblance(f: Filter) -> str:
    """The standard alignment an as-built filter is closest to, as a builder says it: a
    near-flat Chebyshev match is "close to Butterworth" with its Q error; the -3 dB point is
    the filter's own."""
    from filtertwin.circuit.prototypes import NEAR_FLAT_RIPPLE_DB, q_deviation_pct

    m = f.resembles
    assert m is not None
    minus_3 = minus_3db_hz(f)
    at = f", -3 dB at {units.format_si(minus_3, 'Hz', 4)}" if minus_3 is not None else ""
    if m.alignment == "chebyshev" and (m.ripple_db or 0.0) < NEAR_FLAT_RIPPLE_DB:
        dev = q_deviation_pct(lowpass_sections(f.stages))
        if len(dev) == 1:
            q_text = f"Q {abs(dev[0]):.0f} % {'high' if dev[0] >= 0 else 'low'}"
        else:
            q_text = "stage Qs " + ", ".join(f"{d:+.0f} %" for d in dev) + " from Butterworth's"
        return f"close to Butterworth, {q_text}{at}"
    corner = m.corner_scale if f.response == "lowpass" else 1.0 / m.corner_scale
    name = m.description.split(", corner")[0]
    text = (
        f"{name} at {units.format_si(corner, 'Hz', 4)}{at} (distance {m.distance:.3f}, 0 = exact)"
    )
    if m.distance > FAR_DISTANCE:
        return f"none is close; the nearest is {text}"
    return text


def minus_3db_hz(f: Filter) -> float | None:
    """Where a low-pass or high-pass filter's as-built response is 3 dB below its passband
    gain (the first such point going away from the passband); None for a band-pass."""
    if f.response not in ("lowpass", "highpass"):
        return None
    f0s = [s.built.f0_hz for s in f.stages]
    grid = np.geomspace(min(f0s) / 100, max(f0s) * 100, 4001)
    if f.response == "highpass":
        grid = grid[::-1]
    level = 20 * np.log10(np.abs(f.frequency_response(grid))) - f.passband_db
    below = np.nonzero(level < -3.0)[0]
    if below.size == 0 or below[0] == 0:
        return None
    i = int(below[0])
    # linear interpolation in log frequency between the two grid points around -3 dB
    x0, x1 = math.log(grid[i - 1]), math.log(grid[i])
    y0, y1 = level[i - 1] + 3.0, level[i] + 3.0
    return math.exp(x0 + (x1 - x0) * y0 / (y0 - y1))


def design_table(design: Design, twin: Twin | None = None, noise: DesignNoise | None = None) -> str:
    """The per-filter stage table an engineer reads before building (with the circuit's
    noise when ``noise`` is given)."""
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
        if noise is not None:
            lines += noise_lines(next(n for n in noise.filters if n.name == f.name), noise)
        if twin is not None and f.name in twins:
            lines.append(fidelity_line(twins[f.name], twin))
    if noise is not None and noise.sum is not None:
        lines.append("")
        lines.append("sum of the filters (separate amplifiers: their noises add as powers):")
        lines += noise_lines(noise.sum, noise)
    if design.warnings:
        lines.append("")
        lines.append("warnings:")
        lines += [f"  ! {w}" for w in design.warnings]
    return "\n".join(lines)


def _volts(v: float) -> str:
    return units.format_si(v, "V", 4)


def _with_a(value: float | None, weighted: float | None, unit: str) -> str:
    text = f"{value:.1f}{unit}" if value is not None else "-"
    return text + (f" (A: {weighted:.1f}{unit})" if weighted is not None else "")


def noise_lines(n: NoiseFigures, noise: DesignNoise) -> list[str]:
    """The noise of one output in three lines of the design table."""
    lo, hi = n.band_hz
    temp_c = noise.temperature_k - 273.15
    rms = f"{_volts(n.rms_v)} rms" + (
        f", {_volts(n.rms_a_v)} A-weighted" if n.rms_a_v is not None else ""
    )
    dr = ""
    if n.dynamic_range_db is not None:
        dr = "; dynamic range to the clip level "
        dr += _with_a(n.dynamic_range_db, n.dynamic_range_a_db, " dB")
    return [
        f"  noise {units.format_si(lo, 'Hz', 3)} to {units.format_si(hi, 'Hz', 3)} at "
        f"{temp_c:g} C: {rms} ({units.format_si(n.spot_v_per_rthz, 'V', 3)}/rtHz at "
        f"{units.format_si(n.spot_hz, 'Hz', 3)})",
        f"    {_with_a(n.level_dbfs, n.level_a_dbfs, ' dBFS')}; SNR of a full-scale input "
        f"{_with_a(n.snr_db, n.snr_a_db, ' dB')}{dr}",
        f"    {n.stage_words()} gives {100 * n.dominant_stage_share:.0f} % of it; "
        f"largest source: {n.source_words()}, {100 * n.dominant_source_share:.0f} %",
    ]


def noise_dict(n: NoiseFigures) -> dict[str, Any]:
    """One output's noise figures, JSON-ready (V, V/sqrt(Hz), dB)."""
    return {
        "band_hz": list(n.band_hz),
        "rms_v": n.rms_v,
        "rms_a_weighted_v": n.rms_a_v,
        "spot_hz": n.spot_hz,
        "spot_v_per_rthz": n.spot_v_per_rthz,
        "level_dbfs": n.level_dbfs,
        "level_a_weighted_dbfs": n.level_a_dbfs,
        "snr_db": n.snr_db,
        "snr_a_weighted_db": n.snr_a_db,
        "dynamic_range_db": n.dynamic_range_db,
        "dynamic_range_a_weighted_db": n.dynamic_range_a_db,
        "dominant_stage": n.dominant_stage,
        "dominant_stage_share": n.dominant_stage_share,
        "dominant_source": {"stage": n.dominant_source[0], "source": n.dominant_source[1]},
        "dominant_source_share": n.dominant_source_share,
    }


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
    at = units.format_si(fid.at_hz, "Hz", 4)
    if fid.at_error_db <= SMALL_TWIN_ERROR_DB:
        verdict = (
            f"as a difference that is {fid.at_error_db:.1f} dB re the peak, in a region that "
            "adds little to what is heard; the design needs no change for it"
        )
    else:
        verdict = (
            f"as a difference that is {fid.at_error_db:.1f} dB re the peak; compare the twin "
            "with the analog curve in response.png before trusting that region"
        )
    return (
        f"{over} even at {twin.oversampling}x, the largest factor: at {at}, "
        f"{-fid.at_level_db:.1f} dB down the response, the bilinear transform shifts the "
        f"twin's skirt slightly in frequency (the sections alone {fid.sections_db:.3f} dB / "
        f"{fid.sections_deg:.2f} deg); {verdict})"
    )


def _model_dict(m, gain: float) -> dict[str, Any]:
    return {
        "f0_hz": m.f0_hz,
        "q": None if math.isnan(m.q) else m.q,
        "gain": gain,
        "extra_pole_hz": m.extra_pole_hz,
    }


def design_dict(
    design: Design, twin: Twin | None = None, noise: DesignNoise | None = None
) -> dict[str, Any]:
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
        if noise is not None:
            entry["noise"] = noise_dict(next(n for n in noise.filters if n.name == f.name))
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
    if noise is not None:
        out["noise"] = {
            "temperature_k": noise.temperature_k,
            "band_hz": list(noise.band_hz),
            "a_weighted": noise.weighted,
            "sum": None if noise.sum is None else noise_dict(noise.sum),
        }
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
