"""Tolerance builds: vectorised polynomials, draws, envelope, yield and the worst build."""

from __future__ import annotations

import json
import math
import re
import subprocess
import sys

import numpy as np
import pytest
import scipy.signal
import scipy.stats

from filtertwin.checks import verdicts
from filtertwin.checks.tolerance import (
    draw_parts,
    magnitude_sq,
    run_tolerance,
    stage_f0_q,
    stage_polynomials,
    worst_build_design,
)
from filtertwin.circuit import sallenkey
from filtertwin.circuit.design import Design, build_design, design_filter, load
from filtertwin.circuit.spec import parse_design
from filtertwin.errors import UserInputError

EXAMPLES = ("bookshelf-2way", "turntable-rumble", "synth-resonant-lowpass", "studio-3way")


def equal_component_design() -> Design:
    return design_filter(response="lowpass", alignment="butterworth", order=4, corner="1 kHz",
                         topology="equal", amplifier="general-purpose bipolar")  # fmt: skip


def every_stage_kind() -> list[tuple[Design, object]]:
    """Stages of every response, order and topology, with and without an amplifier model."""
    with_gain = [
        design_filter(response=r, alignment="butterworth", order=3, corner="1 kHz",
                      topology="gain", gain="6 dB", amplifier="low-noise bipolar")
        for r in ("lowpass", "highpass")
    ]  # fmt: skip
    designs = [load(n) for n in EXAMPLES] + [equal_component_design(), *with_gain]
    return [(d, amp) for d in designs for amp in (d.amplifier, None)]


def per_build_circuits(design: Design, draws, build: int):
    for filt, stages in zip(design.filters, draws, strict=True):
        for stage, parts in zip(filt.stages, stages, strict=True):
            values = {k: float(v[build]) for k, v in parts.items()}
            yield stage, stage.circuit.with_parts(**values), parts


def test_vectorised_polynomials_equal_the_per_stage_transfer_function():
    kinds = set()
    for design, amp in every_stage_kind():
        draws = draw_parts(design, 6, seed=3)
        for build in range(6):
            for _, circuit, parts in per_build_circuits(design, draws, build):
                b_ref, a_ref = sallenkey.transfer_function(circuit, amp)
                b, a = stage_polynomials(circuit.response, circuit.order, parts, amp)
                np.testing.assert_allclose(a[build], a_ref, rtol=1e-12)
                padded = np.concatenate([np.zeros(len(a_ref) - len(b_ref)), b_ref])
                np.testing.assert_allclose(b[build], padded, rtol=1e-12, atol=1e-300)
                kinds.add((circuit.response, circuit.order, circuit.topology, amp is None))
    wanted = {(r, o, "gain", i) for r in ("lowpass", "highpass") for o in (1, 2)
              for i in (True, False)}  # fmt: skip
    wanted |= {(r, 2, "unity", i) for r in ("lowpass", "highpass") for i in (True, False)}
    wanted |= {("lowpass", 2, "equal", i) for i in (True, False)}
    assert wanted <= kinds


def test_f0_and_q_equal_the_stage_analysis_per_build():
    for design, amp in every_stage_kind():
        draws = draw_parts(design, 4, seed=11)
        for build in range(4):
            for _, circuit, parts in per_build_circuits(design, draws, build):
                model = sallenkey.analyze(circuit, amp)
                _, a = stage_polynomials(circuit.response, circuit.order, parts, amp)
                f0, q = stage_f0_q(circuit.order, a)
                assert f0[build] == pytest.approx(model.f0_hz, rel=1e-9)
                if circuit.order == 2:
                    assert q[build] == pytest.approx(model.q, rel=1e-9)
                else:
                    assert math.isnan(q[build])


def test_vectorised_magnitude_equals_scipy_freqs():
    design = load("bookshelf-2way")
    draws = draw_parts(design, 5, seed=1)
    f = np.geomspace(20.0, 20000.0, 97)
    for _, circuit, parts in per_build_circuits(design, draws, 2):
        b, a = stage_polynomials(circuit.response, circuit.order, parts, design.amplifier)
        _, h = scipy.signal.freqs(b[2], a[2], worN=2 * np.pi * f)  # scipy.signal.freqs
        np.testing.assert_allclose(magnitude_sq(b, a, f)[2], np.abs(h) ** 2, rtol=1e-10)


def zero_tolerance(name: str) -> Design:
    spec = load(name).spec
    from dataclasses import replace

    parts = replace(spec.parts, resistor_tolerance=0.0, capacitor_tolerance=0.0)
    return build_design(replace(spec, parts=parts))


@pytest.mark.parametrize("distribution", ["uniform", "gaussian"])
def test_zero_tolerance_gives_exactly_the_nominal_design(distribution):
    design = zero_tolerance("bookshelf-2way")
    result = run_tolerance(design, 50, distribution=distribution, seed=2)
    worst = worst_build_design(design, result)
    f = np.geomspace(100.0, 20000.0, 50)
    for nominal, built in zip(design.filters, worst.filters, strict=True):
        for a, b in zip(nominal.stages, built.stages, strict=True):
            assert a.circuit.parts() == b.circuit.parts()  # exactly the same values
        assert np.array_equal(nominal.frequency_response(f), built.frequency_response(f))
    for ft, filt in zip(result.filters, design.filters, strict=True):
        exact = 20 * np.log10(np.abs(filt.frequency_response(ft.f_hz)))
        # Filter.frequency_response factors the amplifier pole out of each stage first
        # (sallenkey.split_sections): the two agree to rounding, about 1e-6 dB
        np.testing.assert_allclose(ft.nominal_db, exact, atol=1e-5)
        for envelope in (ft.min_db, ft.median_db, ft.max_db, ft.worst_db):
            np.testing.assert_allclose(envelope, ft.nominal_db, atol=1e-9)
        assert ft.worst_deviation_db < 1e-9 and ft.yield_fraction == 1.0
        assert all(s.f0_hz.std < 1e-9 * s.f0_hz.nominal for s in ft.stages)


def relative_deviations(design: Design, draws) -> dict[str, np.ndarray]:
    out: dict[str, list[np.ndarray]] = {"R": [], "C": []}
    for filt, stages in zip(design.filters, draws, strict=True):
        for stage, parts in zip(filt.stages, stages, strict=True):
            for name, values in parts.items():
                out[name[0]].append(values / stage.circuit.parts()[name] - 1.0)
    return {k: np.concatenate(v) for k, v in out.items()}


def test_gaussian_draws_put_the_tolerance_at_three_sigma():
    design = load("bookshelf-2way")  # resistors 1 %, capacitors 5 %
    tol = {"R": 0.01, "C": 0.05}
    dev = relative_deviations(design, draw_parts(design, 20000, distribution="gaussian", seed=7))
    for kind, d in dev.items():
        z = d / tol[kind]
        assert np.std(z) == pytest.approx(1 / 3, rel=0.01)  # 160k draws: SE 0.2 %
        outside = np.mean(np.abs(z) > 1.0)
        # two-sided normal tail beyond 3 sigma (scipy.stats.norm): 0.27 %
        assert outside == pytest.approx(2 * scipy.stats.norm.sf(3.0), rel=0.2)


def test_uniform_draws_stay_within_the_tolerance():
    design = load("bookshelf-2way")
    dev = relative_deviations(design, draw_parts(design, 20000, distribution="uniform", seed=7))
    for kind, tol in (("R", 0.01), ("C", 0.05)):
        assert np.max(np.abs(dev[kind])) <= tol
        # standard deviation of a uniform distribution on [-t, t] is t / sqrt(3)
        # (scipy.stats.uniform(-t, 2t).std(), the reference); 20000 draws: SE about 0.5 %
        ref = scipy.stats.uniform(-tol, 2 * tol).std()
        assert ref == pytest.approx(tol / math.sqrt(3), rel=1e-12)
        assert np.std(dev[kind]) == pytest.approx(ref, rel=0.01)  # scipy.stats.uniform


def test_envelope_and_yield_equal_a_per_build_loop_with_scipy_freqs():
    design = load("studio-3way")
    builds = 150
    result = run_tolerance(design, builds, seed=5)
    draws = draw_parts(design, builds, seed=5)  # the same seed draws the same parts
    passing = np.ones(builds, bool)
    for filt, stages, ft in zip(design.filters, draws, result.filters, strict=True):
        db = np.empty((builds, len(ft.f_hz)))
        for b in range(builds):
            h = np.ones(len(ft.f_hz), complex)
            for stage, parts in zip(filt.stages, stages, strict=True):
                circuit = stage.circuit.with_parts(**{k: float(v[b]) for k, v in parts.items()})
                num, den = sallenkey.transfer_function(circuit, design.amplifier)
                h *= scipy.signal.freqs(num, den, worN=2 * np.pi * ft.f_hz)[1]
            db[b] = 20 * np.log10(np.abs(h))
        np.testing.assert_allclose(ft.min_db, db.min(axis=0), atol=1e-8)
        np.testing.assert_allclose(ft.max_db, db.max(axis=0), atol=1e-8)
        np.testing.assert_allclose(ft.median_db, np.median(db, axis=0), atol=1e-8)
        m, f = ft.mask, ft.f_hz
        band = (f >= m.pass_hz[0] * (1 - 1e-12)) & (f <= m.pass_hz[1] * (1 + 1e-12))
        ok = np.all(np.abs(db[:, band] - ft.passband_db) <= m.ripple_db, axis=1)
        for s in m.stops:
            cols = (f >= s.lo_hz * (1 - 1e-12)) & (f <= s.hi_hz * (1 + 1e-12))
            ok &= np.all(ft.passband_db - db[:, cols] >= s.min_atten_db, axis=1)
        assert ft.yield_fraction == ok.mean()
        passing &= ok
    assert result.yield_fraction == passing.mean()
    assert 0.0 < result.yield_fraction < 1.0  # capacitors 10 %: some builds fail the mask


def test_default_mask_follows_the_documented_rule():
    design = design_filter(response="lowpass", alignment="butterworth", order=4,
                           corner="1 kHz", parts={"capacitors": "E24"})  # fmt: skip
    (ft,) = run_tolerance(design, 20, seed=1).filters
    assert ft.mask.pass_hz[1] == 500.0 and ft.mask.ripple_db == 1.0
    (stop,) = ft.mask.stops
    assert stop.lo_hz == 2000.0
    # Butterworth |H(2 fc)|^2 = 1 / (1 + 2^8) (Williams & Taylor); the mask allows 3 dB less
    # (as-built E96/E24 parts: within 0.1 dB of the ideal)
    assert stop.min_atten_db == pytest.approx(10 * math.log10(1 + 2**8) - 3.0, abs=0.1)
    (custom,) = run_tolerance(design, 20, seed=1, ripple_db=0.5, stop_hz=3000.0,
                              stop_db=40.0).filters  # fmt: skip
    assert custom.mask.ripple_db == 0.5
    assert custom.mask.stops[0].lo_hz == 3000.0 and custom.mask.stops[0].min_atten_db == 40.0
    # Butterworth at 3 fc: 10 log10(1 + 3^8) = 38.2 dB, short of the 40 dB asked
    assert not custom.nominal_passes and custom.yield_fraction == 0.0
    high = design_filter(response="highpass", alignment="butterworth", order=2, corner="100")
    (ft,) = run_tolerance(high, 20, seed=1).filters
    assert ft.mask.pass_hz[0] == 200.0 and ft.mask.stops[0].hi_hz == 50.0


def test_the_same_seed_repeats_the_run_and_the_seed_is_reported():
    design = load("turntable-rumble")
    a = run_tolerance(design, 300, seed=42, distribution="gaussian")
    b = run_tolerance(design, 300, seed=42, distribution="gaussian")
    assert a.to_dict() == b.to_dict() and a.seed == 42
    fresh = run_tolerance(design, 10)
    assert run_tolerance(design, 10, seed=fresh.seed).to_dict() == fresh.to_dict()


def test_worst_build_design_has_the_worst_parts_and_deviates_as_reported():
    design = load("bookshelf-2way")
    result = run_tolerance(design, 2000, seed=9)
    worst = worst_build_design(design, result)
    assert "worst of 2000 builds" in worst.title
    assert [f.name for f in worst.filters] == [f.name for f in design.filters]
    assert [f.polarity for f in worst.filters] == [f.polarity for f in design.filters]
    deviations = []
    for filt, parts, ft in zip(worst.filters, result.worst_parts, result.filters, strict=True):
        assert [s.circuit.parts() for s in filt.stages] == list(parts)
        db = 20 * np.log10(np.abs(filt.frequency_response(ft.f_hz)))
        np.testing.assert_allclose(db, ft.worst_db, atol=1e-5)  # see the zero-tolerance test
        window = ft.nominal_db >= ft.passband_db - 20
        deviations.append(np.max(np.abs(db - ft.nominal_db)[window]))
    assert max(deviations) == pytest.approx(result.worst_deviation_db, abs=1e-5)
    assert result.worst_deviation_db == max(ft.worst_deviation_db for ft in result.filters)


def test_bad_inputs_are_refused_with_what_and_how():
    design = load("bookshelf-2way")
    for builds in (0, -3, 2_000_000):
        with pytest.raises(UserInputError, match=r"number of builds .* from 1 to 1000000"):
            run_tolerance(design, builds)
    with pytest.raises(UserInputError, match=r"distribution 'normal' is unknown"):
        run_tolerance(design, 10, distribution="normal")
    with pytest.raises(UserInputError, match=r"ripple 0 dB must be positive"):
        run_tolerance(design, 10, ripple_db=0.0)
    with pytest.raises(UserInputError, match=r"several \(woofer, tweeter\).* --filter"):
        run_tolerance(design, 10, stop_hz=5000.0)
    with pytest.raises(UserInputError, match=r"no filter named 'mid'"):
        run_tolerance(design, 10, filter_name="mid")
    other = load("turntable-rumble")
    with pytest.raises(ValueError, match="does not belong to this design"):
        worst_build_design(other, run_tolerance(design, 10, seed=1))


@pytest.mark.parametrize(
    ("argv", "pattern"),
    [
        (["--builds", "0"], r"number of builds 0 must be a whole number"),
        (["--builds", "10", "--stop-hz", "5k"], r"choose one with --filter NAME"),
        (
            ["--builds", "10", "--stop-hz", "fast", "--filter", "woofer"],
            r"argument --stop-hz: cannot read 'fast'",
        ),
        (["--builds", "10", "--seed", "-1"], r"--seed -1 must be a whole number >= 0"),
        (["--builds", "10", "--ripple-db", "-2"], r"ripple -2 dB must be positive"),
    ],
)
def test_bad_command_line_input_gives_one_line_and_status_2(argv, pattern, capsys):
    from filtertwin import cli

    assert cli.main(["tolerance", "bookshelf-2way", *argv]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and re.search(pattern, err), err


def test_command_line_prints_json_and_writes_the_figure(tmp_path):
    def run(*args):
        return subprocess.Popen(
            [sys.executable, "-m", "filtertwin", "tolerance", *args],
            cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        )  # fmt: skip

    good = run("bookshelf-2way", "--builds", "500", "--seed", "3", "--distribution",
               "gaussian", "--json", "--out", "plots")  # fmt: skip
    bad = run("bookshelf-2way", "--builds", "-5")
    out, err = good.communicate()
    assert good.returncode == 0, err
    data = json.loads(out)
    assert data["builds"] == 500 and data["seed"] == 3 and data["distribution"] == "gaussian"
    assert set(data["worst"]) >= {"build", "deviation_db", "parts"}
    assert set(data["filters"][0]["stages"][0]["f0_hz"]) >= {"p1", "p50", "p99", "std"}
    assert (tmp_path / data["files"]["figure"]).read_bytes()[:4] == b"\x89PNG"
    out, err = bad.communicate()
    assert bad.returncode == 2 and out == "" and err.count("\n") == 1
    assert "number of builds -5" in err


def test_command_defaults_agree_with_the_check():
    from filtertwin.checks import tolerance as check
    from filtertwin.commands import tolerance as command

    assert command.DISTRIBUTIONS == check.DISTRIBUTIONS
    assert command.DEFAULT_RIPPLE_DB == check.DEFAULT_RIPPLE_DB
    assert command.DEFAULT_YIELD_PCT == 100 * verdicts.DEFAULT_YIELD_TARGET


def _tolerance_cli(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "filtertwin", "tolerance", *args],
                          capture_output=True, text=True, check=False)  # fmt: skip


def test_tolerance_prints_a_yield_verdict_and_exits_1_below_the_target():
    # README's exit-status table: 0 PASS, 1 a check failed; default target 90 %
    args = ("studio-3way", "--builds", "200", "--seed", "1")
    first = _tolerance_cli(*args, "--json")
    data = json.loads(first.stdout)
    pct = 100 * data["yield"]
    assert data["min_yield"] == 0.9
    assert first.returncode == (0 if pct >= 90 else 1) and data["verdict"] in ("PASS", "FAIL")
    above = _tolerance_cli(*args, "--min-yield", f"{min(pct + 0.5, 100):g}")
    if pct < 99.5:
        assert above.returncode == 1, above.stderr
        (line,) = [s for s in above.stdout.splitlines() if s.startswith("yield: design")]
        assert line.startswith(f"yield: design FAIL ({pct:.1f} % of 200 builds")
        assert above.stdout.splitlines()[-1].startswith("verdict: FAIL (1 of 1 failed: yield")
    at = _tolerance_cli(*args, "--min-yield", f"{max(pct - 0.05, 0.01):.2f}")
    assert at.returncode == 0 and at.stdout.splitlines()[-1] == "verdict: PASS (1 check)"
    bad = _tolerance_cli("bookshelf-2way", "--builds", "50", "--min-yield", "120")
    assert bad.returncode == 2 and bad.stdout == "" and bad.stderr.count("\n") == 1
    assert "--min-yield: must be above 0 and at most 100" in bad.stderr


def test_tolerance_of_one_filter_lists_only_that_filters_parts_under_the_worst_build():
    run = _tolerance_cli("studio-3way", "--builds", "50", "--seed", "2", "--filter", "mid")
    assert run.returncode in (0, 1), run.stderr
    tail = run.stdout.split("worst build:")[1].splitlines()[1:]
    parts = [s for s in tail if s.startswith("  ") and " stage " in s]
    assert parts and all(s.startswith("  mid stage ") for s in parts)


def test_a_design_spec_round_trip_keeps_every_filter_kind_renderable():
    data = {
        "filter": [
            {"name": "lp", "response": "lowpass", "alignment": "bessel", "order": 3,
             "corner": "1k"},
            {"name": "bp", "response": "bandpass", "alignment": "butterworth", "order": 2,
             "corner": ["200", "2k"], "polarity": "inverted"},
        ]
    }  # fmt: skip
    design = build_design(parse_design(data, "<test>"))
    result = run_tolerance(design, 100, seed=4)
    worst = worst_build_design(design, result)
    assert [f.spec.kind for f in worst.filters] == ["built", "built"]
    assert [f.response for f in worst.filters] == ["lowpass", "bandpass"]
    assert worst.filters[1].polarity == -1
    assert [s.circuit.order for s in worst.filters[0].stages] == [1, 2]
