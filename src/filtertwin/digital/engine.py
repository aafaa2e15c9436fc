"""Compiled streaming runner for cascades of second-order sections (biquads).

Every cascade ("chain") filters the same input block: the ways of a crossover, candidate
designs A and B, each on all channels. The arithmetic is scipy's transposed direct form II in
float64, in scipy's association order, so float64 output is bit-identical to
``scipy.signal.sosfilt``; float32 blocks are widened on the way in and rounded on the way out.

How the kernel is laid out (why it is fast):

* every (chain, channel) pair is a *lane*; lanes are packed four to a 256-bit vector, so four
  channels or chains cost about as much as one;
* sections are skewed in time: in step ``t`` section ``s`` works on the four frames from
  ``4 (t - s)``, keeping its state in registers meanwhile, so the sections of one step do not
  wait for each other (a cascade is otherwise one long chain of dependent multiplies and adds
  per sample);
* blocks go through a small float64 staging area in chunks of ``_CHUNK_FRAMES`` frames, and
  state values below ``FLUSH_BELOW`` are set to zero after every chunk: a decaying state would
  otherwise become subnormal and every operation on it far slower;
* all buffers are made at construction; ``process`` only calls the compiled kernel.

Limiting to the amplifier's output swing, when a section has a finite level, clamps that
section's output to +/- level before it reaches both the next section and the section's own
feedback (the amplifier's output is what its feedback network sees), and counts the clamped
samples.

Slew-rate limiting, when a section has a finite step, is the usual discrete model of an
amplifier whose output cannot move faster than its slew rate SR: the section's output may
change by at most ``step = SR / rate`` (full-scale units per sample) from its previous output
value, ``y[n] = y[n-1] + clip(y_lin[n] - y[n-1], -step, +step)``, where ``y_lin`` is what the
linear section (after the swing clamp) would give. The limited value, not ``y_lin``, goes on
to the next section and into the section's own state (``z0``, ``z1`` are updated from it), as
the amplifier's slewing output is what its feedback network sees. Where a stage is split into
several sections, the limits sit on its last section: the amplifier's output. The swing clamp
comes first, so an output slewing towards a rail stops at the rail. Samples where the step
was limited are counted per section as slewed; a sample counts as clipped only when the rail,
not the slew rate, held it (an output still slewing towards the rail has not reached it). A
step within the limit leaves the sample untouched (a selection, not
``y[n-1] + (y_lin[n] - y[n-1])``), so a runner whose limits are never reached is bit-identical
to one without limits. Each section keeps its last output value for this between blocks;
after a block run without slew limits, the kernel recovers it from the cascade's working rows.
The model is only as fine as the rate: a sine's step per sample, 2 A sin(pi f / rate), is
short of its slope times the sample period by 1 - sinc, so a twin near its slew limit runs
oversampled (:func:`filtertwin.digital.twin.slew_rate_needed_hz`).

How limits stay cheap, every way exact (the same output, bit for bit, as the full limited
loop): a section with limits first runs a step as if it had none, and keeps it if no output
left the swing and no step exceeded the slew step (clipping and slewing come in runs, so
after a limited step the next goes straight to the limited loop); and where no lane's
previous output is within a few slew steps of its rail, the slew-limited loop leaves the
swing clamp out, as the output cannot reach the rail within that step. Counts are kept as
integers in the loops.

A block whose input holds NaN or inf, or after which a chain's state is no longer finite,
resets that chain's state and zeroes that chain's output for the block.
"""

from __future__ import annotations

import operator
from collections.abc import Sequence

import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.core import cgutils
from numba.extending import intrinsic, models, overload, register_model

__all__ = ["FLUSH_BELOW", "CascadeRunner", "sosfilt_blocks", "validate_sos", "warm_up"]

FLUSH_BELOW = 1e-30
"""State values smaller than this (in absolute value, full-scale units) are set to zero."""

_CHUNK_FRAMES = 256  # frames staged per pass; also how often the state is flushed
_FRAMES_PER_STEP = 4  # frames each section takes per step (the state stays in registers)
_WIDTH = 4  # float64 lanes per vector (256 bits): one lane group
# Coefficients: for each lane group and section a block of rows, each row _WIDTH lanes wide
# (b0, b1, b2, a1, a2, swing level, slew step, and the section's kind in every lane: 0 no
# limits, 1 swing clamping, 2 clamping and slewing, for every lane of its group; 256 bytes):
_B0, _B1, _B2, _A1, _A2, _LEVEL, _STEP, _KIND = (row * _WIDTH for row in range(8))
_SEC_ROWS = 8
_SEC_BLOCK = _SEC_ROWS * _WIDTH
# Working memory: for each lane group and section (plus one slot for the cascade's output):
# z0, z1, clamped-sample count, previous output, slewed-sample count, whether the section's
# last step was clamped or slewed (first lane), then the section's input for the frames of a
# step (a section's outputs are the next slot's input)
_Z0, _Z1, _COUNT, _PREV, _SLEWED, _LIMITING, _INPUT = (row * _WIDTH for row in range(7))
_MEM_BLOCK = _INPUT + _FRAMES_PER_STEP * _WIDTH
# the kernels: no limits, swing clamping only, swing clamping and slew limiting; and (a loop of
# the slewing kernel only, never a section's mark) slew limiting where the rails are out of reach
_PLAIN, _CLAMP, _SLEW, _SLEW_CLEAR = 0, 1, 2, 3


# --- a 4 x float64 vector value for the kernel ----------------------------------------------
# numba does not vectorise across the lanes of this kernel on its own, so the kernel spells the
# vector operations out with these few primitives. Each one is plain IEEE arithmetic on every
# element (no fused multiply-add), which keeps results identical to scalar code.


class _Float64x4(types.Type):
    def __init__(self) -> None:
        super().__init__(name="filtertwin.digital.engine.float64x4")


_VEC = _Float64x4()
_LL_VEC = ir.VectorType(ir.DoubleType(), _WIDTH)


@register_model(_Float64x4)
class _Float64x4Model(models.PrimitiveModel):
    def __init__(self, dmm, fe_type):
        super().__init__(dmm, fe_type, _LL_VEC)


def _element_pointer(context, builder, array_type, array, index):
    data = context.make_array(array_type)(context, builder, array).data
    return builder.bitcast(builder.gep(data, [index]), _LL_VEC.as_pointer())


@intrinsic
def _vload(typingctx, array, index):
    """Four float64 from ``array[index:index + 4]``."""

    def codegen(context, builder, sig, args):
        ptr = _element_pointer(context, builder, sig.args[0], args[0], args[1])
        return builder.load(ptr, align=8, typ=_LL_VEC)

    return _VEC(array, index), codegen


@intrinsic
def _vstore(typingctx, array, index, value):
    """Store four float64 to ``array[index:index + 4]``."""

    def codegen(context, builder, sig, args):
        ptr = _element_pointer(context, builder, sig.args[0], args[0], args[1])
        builder.store(args[2], ptr, align=8)
        return context.get_dummy_value()

    return types.none(array, index, value), codegen


def _vector_binary(instruction: str):
    @intrinsic
    def operation(typingctx, a, b):
        def codegen(context, builder, sig, args):
            return getattr(builder, instruction)(args[0], args[1])

        return _VEC(a, b), codegen

    return operation


_vadd = _vector_binary("fadd")
_vsub = _vector_binary("fsub")
_vmul = _vector_binary("fmul")


def _overload_vector_operator(op, impl):
    @overload(op)
    def vector_operator(a, b):
        if isinstance(a, _Float64x4) and isinstance(b, _Float64x4):
            return lambda a, b: impl(a, b)
        return None


_overload_vector_operator(operator.add, _vadd)
_overload_vector_operator(operator.sub, _vsub)
_overload_vector_operator(operator.mul, _vmul)


@intrinsic
def _vzeros(typingctx):
    def codegen(context, builder, sig, args):
        return ir.Constant(_LL_VEC, [0.0] * _WIDTH)

    return _VEC(), codegen


@intrinsic
def _vall_zero(typingctx, v):
    """True if every element of ``v`` equals zero (so none is NaN)."""

    def codegen(context, builder, sig, args):
        zero = builder.fcmp_ordered("==", args[0], ir.Constant(_LL_VEC, [0.0] * _WIDTH))
        bits = builder.bitcast(zero, ir.IntType(_WIDTH))
        return builder.icmp_unsigned("==", bits, ir.Constant(ir.IntType(_WIDTH), 2**_WIDTH - 1))

    return types.boolean(v), codegen


@intrinsic
def _vclamp(typingctx, y, level):
    """``y`` clamped to +/- ``level``, element by element (NaN stays NaN)."""

    def codegen(context, builder, sig, args):
        y, level = args
        low = builder.fneg(level)
        above = builder.fcmp_ordered(">", y, level)
        below = builder.fcmp_ordered("<", y, low)
        return builder.select(above, level, builder.select(below, low, y))

    return _VEC(y, level), codegen


@intrinsic
def _vhigh(typingctx, prev, step, level):
    """The highest output allowed after ``prev``: min(prev + step, level)."""

    def codegen(context, builder, sig, args):
        prev, step, level = args
        rise = builder.fadd(prev, step)
        return builder.select(builder.fcmp_ordered("<", rise, level), rise, level)

    return _VEC(prev, step, level), codegen


@intrinsic
def _vlow(typingctx, prev, step, level):
    """The lowest output allowed after ``prev``: max(prev - step, -level)."""

    def codegen(context, builder, sig, args):
        prev, step, level = args
        fall, low = builder.fsub(prev, step), builder.fneg(level)
        return builder.select(builder.fcmp_ordered(">", fall, low), fall, low)

    return _VEC(prev, step, level), codegen


def _vector_pick(predicate: str):
    @intrinsic
    def pick(typingctx, a, b):
        def codegen(context, builder, sig, args):
            a, b = args
            return builder.select(builder.fcmp_ordered(predicate, a, b), a, b)

        return _VEC(a, b), codegen

    return pick


_vmax = _vector_pick(">")  # the larger of two, element by element (b where either is NaN)
_vmin = _vector_pick("<")


@intrinsic
def _vbeyond(typingctx, top, bottom, limit):
    """True if any element of ``top`` is above ``limit`` or of ``bottom`` below -``limit``,
    or any is NaN (so that the limited loop, which handles NaN, runs)."""

    def codegen(context, builder, sig, args):
        top, bottom, limit = args
        above = builder.fcmp_unordered(">", top, limit)
        below = builder.fcmp_unordered("<", bottom, builder.fneg(limit))
        bits = builder.bitcast(builder.or_(above, below), ir.IntType(_WIDTH))
        return builder.icmp_unsigned("!=", bits, ir.Constant(ir.IntType(_WIDTH), 0))

    return types.boolean(top, bottom, limit), codegen


@intrinsic
def _vbetween(typingctx, y, low, high):
    """``y`` clamped to [``low``, ``high``], element by element (NaN stays NaN)."""

    def codegen(context, builder, sig, args):
        y, low, high = args
        y = builder.select(builder.fcmp_ordered("<", y, low), low, y)
        return builder.select(builder.fcmp_ordered(">", y, high), high, y)

    return _VEC(y, low, high), codegen


def _bits(builder, v):
    return builder.bitcast(v, ir.VectorType(ir.IntType(64), _WIDTH))


def _tally(builder, tally, mask):
    """``tally`` (int64 counts carried in a float64 vector) plus one where ``mask`` is set:
    one integer subtraction of the all-ones mask, where a float count would need a
    conversion and an addition; the counts become floats once per call (``_vtally_value``)."""
    counts = builder.sub(
        _bits(builder, tally), builder.sext(mask, ir.VectorType(ir.IntType(64), _WIDTH))
    )
    return builder.bitcast(counts, _LL_VEC)


@intrinsic
def _vtally_changed(typingctx, tally, out, y):
    """``tally`` plus one where ``out != y`` (neither NaN)."""

    def codegen(context, builder, sig, args):
        tally, out, y = args
        return _tally(builder, tally, builder.fcmp_ordered("!=", out, y))

    return _VEC(tally, out, y), codegen


@intrinsic
def _vtally_railed(typingctx, tally, out, y, level):
    """``tally`` plus one where ``out != y`` and ``|out| == level`` (held at the rail)."""

    def codegen(context, builder, sig, args):
        tally, out, y, level = args
        fabs = cgutils.get_or_insert_function(
            builder.module, ir.FunctionType(_LL_VEC, [_LL_VEC]), "llvm.fabs.v4f64"
        )
        at_rail = builder.fcmp_ordered("==", builder.call(fabs, [out]), level)
        changed = builder.fcmp_ordered("!=", out, y)
        return _tally(builder, tally, builder.and_(at_rail, changed))

    return _VEC(tally, out, y, level), codegen


@intrinsic
def _vtally_value(typingctx, tally):
    """The counts of a tally as float64."""

    def codegen(context, builder, sig, args):
        return builder.sitofp(_bits(builder, args[0]), _LL_VEC)

    return _VEC(tally), codegen


@intrinsic
def _vtally_exceeds(typingctx, tally, y, level):
    """``tally`` plus one where ``|y| > level``."""

    def codegen(context, builder, sig, args):
        tally, y, level = args
        above = builder.fcmp_ordered(">", y, level)
        below = builder.fcmp_ordered("<", y, builder.fneg(level))
        return _tally(builder, tally, builder.or_(above, below))

    return _VEC(tally, y, level), codegen


# --- kernel -----------------------------------------------------------------------------------


@njit
def _gather(x, start, frames, n_chains, mem, stage, width):
    """Copy input frames into the staging rows (frame-major, one lane per chain and channel)."""
    channels = x.shape[1]
    for ch in range(channels):
        column = x[start : start + frames, ch]
        for chain in range(n_chains):
            first = stage + chain * channels + ch
            for f in range(frames):
                mem[first + f * width] = column[f]


@njit(inline="always")
def _section_frames(sec, mem, c, m, per_step, kind, keep_prev):
    """Run one section over its ``per_step`` staged frames (``kind`` and ``keep_prev`` are
    compile-time constants: the limits applied, and whether ``_PREV`` is kept). Returns True
    if a clamping or slewing kind limited any sample."""
    b0, b1, b2 = _vload(sec, c + _B0), _vload(sec, c + _B1), _vload(sec, c + _B2)
    a1, a2 = _vload(sec, c + _A1), _vload(sec, c + _A2)
    z0, z1 = _vload(mem, m + _Z0), _vload(mem, m + _Z1)
    level = step = prev = _vzeros()
    # counts for this call, as integers (see _tally), added to the stored ones at the end
    clamped = slewed = _vzeros()
    if kind == _CLAMP or kind == _SLEW:
        level = _vload(sec, c + _LEVEL)
    if kind >= _SLEW:
        step, prev = _vload(sec, c + _STEP), _vload(mem, m + _PREV)
    y = _vzeros()
    for k in range(per_step):
        x = _vload(mem, m + _INPUT + k * _WIDTH)
        # scipy's order: y = b0 x + z0; z0 = (b1 x - a1 y) + z1; z1 = b2 x - a2 y
        y = b0 * x + z0
        if kind == _CLAMP:
            clamped = _vtally_exceeds(clamped, y, level)
            y = _vclamp(y, level)
        elif kind == _SLEW:
            # clamping to the swing, then limiting the step, is one clamp to these bounds
            # (prev is within the swing)
            limited = _vbetween(y, _vlow(prev, step, level), _vhigh(prev, step, level))
            # every limited sample, and those held at the rail (clipped, not slewing): the
            # slewed count is their difference (see _store_state)
            slewed = _vtally_changed(slewed, limited, y)
            clamped = _vtally_railed(clamped, limited, y, level)
            y = limited
            prev = y
        elif kind == _SLEW_CLEAR:
            # the rails are out of reach in this step (see _rail_in_reach): the step limit only
            limited = _vbetween(y, prev - step, prev + step)
            slewed = _vtally_changed(slewed, limited, y)
            y = limited
            prev = y
        z0 = (b1 * x - a1 * y) + z1
        z1 = b2 * x - a2 * y
        _vstore(mem, m + _MEM_BLOCK + _INPUT + k * _WIDTH, y)  # next section's input
    _vstore(mem, m + _Z0, z0)
    _vstore(mem, m + _Z1, z1)
    if kind == _CLAMP or kind == _SLEW:
        _vstore(mem, m + _COUNT, _vload(mem, m + _COUNT) + _vtally_value(clamped))
    if keep_prev:
        _vstore(mem, m + _PREV, y)
    if kind >= _SLEW:
        counted = _vtally_value(slewed)
        _vstore(mem, m + _SLEWED, _vload(mem, m + _SLEWED) + counted)
        return not _vall_zero(counted)
    if kind == _CLAMP:
        return not _vall_zero(_vtally_value(clamped))
    return False


@njit(inline="always")
def _rail_in_reach(sec, mem, c, m, per_step):
    """False if no lane's output can reach its rail within the next ``per_step`` samples
    moving at most one slew step per sample from its previous output (one step of margin
    for rounding), so the limited loop may leave the swing clamp out."""
    step, prev = _vload(sec, c + _STEP), _vload(mem, m + _PREV)
    reach = step
    for _ in range(per_step):
        reach = reach + step
    return _vbeyond(prev + reach, prev - reach, _vload(sec, c + _LEVEL))


@njit(inline="always")
def _section_fits(sec, mem, c, m, per_step, slewing, keep_prev):
    """Run a limited section over its frames as if it had no limits; keep the result (state,
    and the previous output if ``keep_prev``) and return True if no output left the swing
    and (``slewing``) no step exceeded the slew step, else leave the state as it was and
    return False. ``slewing`` and ``keep_prev`` are compile-time constants.

    The check is a few maxima and minima per step, off the chain of dependent operations
    that sets the speed, so a section that is not being limited costs little more than a
    plain one; the caller runs the limited loop only for the steps that need it.
    """
    b0, b1, b2 = _vload(sec, c + _B0), _vload(sec, c + _B1), _vload(sec, c + _B2)
    a1, a2 = _vload(sec, c + _A1), _vload(sec, c + _A2)
    z0, z1 = _vload(mem, m + _Z0), _vload(mem, m + _Z1)
    level = _vload(sec, c + _LEVEL)
    step = prev = _vzeros()
    if slewing:
        step, prev = _vload(sec, c + _STEP), _vload(mem, m + _PREV)
    y = _vzeros()
    top = bottom = rise = fall = _vzeros()
    for k in range(per_step):
        x = _vload(mem, m + _INPUT + k * _WIDTH)
        y_last = prev if k == 0 else y
        y = b0 * x + z0
        z0 = (b1 * x - a1 * y) + z1
        z1 = b2 * x - a2 * y
        _vstore(mem, m + _MEM_BLOCK + _INPUT + k * _WIDTH, y)  # next section's input
        if k == 0:
            top, bottom = y, y
        else:
            top, bottom = _vmax(top, y), _vmin(bottom, y)
        if slewing:
            change = y - y_last
            if k == 0:
                rise, fall = change, change
            else:
                rise, fall = _vmax(rise, change), _vmin(fall, change)
    if _vbeyond(top, bottom, level):
        return False
    if slewing and _vbeyond(rise, fall, step):
        return False
    _vstore(mem, m + _Z0, z0)
    _vstore(mem, m + _Z1, z1)
    if keep_prev:
        _vstore(mem, m + _PREV, y)
    return True


@njit(inline="always")
def _cascade_steps(sec, mem, frames, n_sections, n_groups, stage, mode, per_step):
    """Run every section over ``frames`` staged frames, in place.

    Sections are skewed: in step ``t`` section ``s`` takes the ``per_step`` frames starting at
    ``(t - s) * per_step``, so the sections of one step are independent. ``frames`` must be a
    multiple of ``per_step``. ``mode`` (a compile-time constant) is ``_PLAIN``, ``_CLAMP`` or
    ``_SLEW``: the most any section needs; each section then runs the loop of its own kind
    (a branch per section and step, predicted well), so sections without limits cost no more
    than in the plain kernel. Returns False if any staged input was NaN or inf.
    """
    steps = frames // per_step
    last = n_sections - 1
    width = n_groups * _WIDTH
    keep = mode == _SLEW
    nonfinite = _vzeros()  # stays zero while every input is finite (x - x == 0)
    for t in range(steps + last):
        s_low = max(0, t - steps + 1)
        s_high = min(last, t)
        for g in range(n_groups):
            c_group = g * n_sections * _SEC_BLOCK
            m_group = g * (n_sections + 1) * _MEM_BLOCK
            staged = stage + g * _WIDTH
            if t < steps:
                for k in range(per_step):
                    x = _vload(mem, staged + (t * per_step + k) * width)
                    nonfinite = nonfinite + (x - x)
                    _vstore(mem, m_group + _INPUT + k * _WIDTH, x)
            for s in range(s_high, s_low - 1, -1):
                c = c_group + s * _SEC_BLOCK
                m = m_group + s * _MEM_BLOCK
                if mode == _PLAIN:
                    _section_frames(sec, mem, c, m, per_step, _PLAIN, False)
                else:
                    kind = sec[c + _KIND]
                    # each limited kind tries its step without limits first, unless its last
                    # step was limited (clipping and slewing come in runs); one shared helper
                    # for both measured slower (1.69x against 1.50x slewing hard), so the two
                    # stay written out
                    if mode == _SLEW and kind == _SLEW:
                        if mem[m + _LIMITING] != 0.0 or not _section_fits(
                            sec, mem, c, m, per_step, True, True
                        ):
                            if _rail_in_reach(sec, mem, c, m, per_step):
                                limiting = _section_frames(sec, mem, c, m, per_step, _SLEW, True)
                            else:
                                limiting = _section_frames(
                                    sec, mem, c, m, per_step, _SLEW_CLEAR, True
                                )
                            mem[m + _LIMITING] = 1.0 if limiting else 0.0
                    elif kind >= _CLAMP:
                        if mem[m + _LIMITING] != 0.0 or not _section_fits(
                            sec, mem, c, m, per_step, False, keep
                        ):
                            limiting = _section_frames(sec, mem, c, m, per_step, _CLAMP, keep)
                            mem[m + _LIMITING] = 1.0 if limiting else 0.0
                    else:
                        _section_frames(sec, mem, c, m, per_step, _PLAIN, keep)
            if t >= last:
                for k in range(per_step):
                    y = _vload(mem, m_group + n_sections * _MEM_BLOCK + _INPUT + k * _WIDTH)
                    _vstore(mem, staged + ((t - last) * per_step + k) * width, y)
    return _vall_zero(nonfinite)


# The three variants differ only in the literal `mode` they pass: a compile-time constant lets
# LLVM drop the clamping and slewing from the inner loop where a chain has no such limits,
# which a runtime flag would not guarantee.
@njit(inline="always")
def _cascade_passes(sec, mem, frames, n_sections, n_groups, stage, mode):
    """Whole steps of ``_FRAMES_PER_STEP`` frames, then the rest one frame per step."""
    whole = frames - frames % _FRAMES_PER_STEP
    rest = stage + whole * n_groups * _WIDTH
    finite = _cascade_steps(sec, mem, whole, n_sections, n_groups, stage, mode, _FRAMES_PER_STEP)
    if frames > whole:
        finite &= _cascade_steps(sec, mem, frames - whole, n_sections, n_groups, rest, mode, 1)
    return finite


@njit
def _cascade(sec, mem, frames, n_sections, n_groups, stage):
    return _cascade_passes(sec, mem, frames, n_sections, n_groups, stage, _PLAIN)


@njit
def _cascade_clamped(sec, mem, frames, n_sections, n_groups, stage):
    return _cascade_passes(sec, mem, frames, n_sections, n_groups, stage, _CLAMP)


@njit
def _cascade_slewed(sec, mem, frames, n_sections, n_groups, stage):
    return _cascade_passes(sec, mem, frames, n_sections, n_groups, stage, _SLEW)


@njit
def _recall_outputs(mem, n_sections, n_groups, row):
    """Set every section's previous output from the input rows of the slot after it.

    After a block run without slew limits, row ``row`` of those rows holds each section's
    last output (the kernel without slew limits keeps no ``_PREV``); ``row < 0``: after
    :meth:`CascadeRunner.reset`, every previous output is zero.
    """
    for g in range(n_groups):
        for s in range(n_sections):
            m = (g * (n_sections + 1) + s) * _MEM_BLOCK
            for w in range(_WIDTH):
                value = 0.0 if row < 0 else mem[m + _MEM_BLOCK + _INPUT + row * _WIDTH + w]
                mem[m + _PREV + w] = value


@njit
def _scatter(out, start, frames, mem, stage, width):
    n_chains, _, channels = out.shape
    for chain in range(n_chains):
        for ch in range(channels):
            column = out[chain, start : start + frames, ch]
            first = stage + chain * channels + ch
            for f in range(frames):
                column[f] = mem[first + f * width]


@njit
def _flush(mem, n_sections, n_groups):
    for g in range(n_groups):
        for s in range(n_sections):
            m = (g * (n_sections + 1) + s) * _MEM_BLOCK
            for i in range(m + _Z0, m + _Z1 + _WIDTH):
                if abs(mem[i]) < FLUSH_BELOW:
                    mem[i] = 0.0


@njit
def _load_state(mem, n_chains, n_sections, channels, work):
    """Copy the public state, (chains, sections, channels, 2) at the start of ``mem``, to work."""
    i = 0
    for chain in range(n_chains):
        for s in range(n_sections):
            for ch in range(channels):
                lane = chain * channels + ch
                m = ((lane // _WIDTH) * (n_sections + 1) + s) * _MEM_BLOCK + lane % _WIDTH
                work[m + _Z0] = mem[i]
                work[m + _Z1] = mem[i + 1]
                i += 2


@njit
def _store_state(mem, n_sections, work, out, frames, input_finite, sec):
    """Copy the work state back to the public state and add up the clip and slew counts.

    A chain whose state is not finite, or every chain when the input was not, is reset (its
    sections' previous outputs too) and its output for the block zeroed. Returns how many
    chains were reset. A slewing section (kind ``_SLEW``) counted every limited sample in
    ``_SLEWED`` and those held at the rail in ``_COUNT``: its slewed count is the difference.
    """
    n_chains, _, channels = out.shape
    counts = n_chains * n_sections * channels * 2
    slews = counts + n_chains * n_sections
    i = 0
    n_reset = 0
    for chain in range(n_chains):
        first = i
        finite = input_finite
        for s in range(n_sections):
            for ch in range(channels):
                lane = chain * channels + ch
                m = ((lane // _WIDTH) * (n_sections + 1) + s) * _MEM_BLOCK + lane % _WIDTH
                z0, z1 = work[m + _Z0], work[m + _Z1]
                finite &= z0 - z0 == 0.0 and z1 - z1 == 0.0
                mem[i] = z0
                mem[i + 1] = z1
                i += 2
                c = ((lane // _WIDTH) * n_sections + s) * _SEC_BLOCK + _KIND + lane % _WIDTH
                slewed = work[m + _SLEWED]
                if sec[c] == _SLEW:
                    slewed -= work[m + _COUNT]
                mem[counts + chain * n_sections + s] += work[m + _COUNT]
                mem[slews + chain * n_sections + s] += slewed
                work[m + _COUNT] = 0.0
                work[m + _SLEWED] = 0.0
        if not finite:
            n_reset += 1
            mem[first:i] = 0.0
            out[chain, :frames, :] = 0.0
            _forget_outputs(work, n_sections, chain * channels, (chain + 1) * channels)
    return n_reset


@njit
def _forget_outputs(work, n_sections, first_lane, end_lane):
    """Zero the previous outputs of lanes ``first_lane:end_lane``, in both places they live."""
    for lane in range(first_lane, end_lane):
        for s in range(n_sections):
            m = ((lane // _WIDTH) * (n_sections + 1) + s) * _MEM_BLOCK + lane % _WIDTH
            work[m + _PREV] = 0.0
            for k in range(_FRAMES_PER_STEP):
                work[m + _MEM_BLOCK + _INPUT + k * _WIDTH] = 0.0


def _memory_layout(n_chains: int, n_sections: int, channels: int) -> tuple[int, int, int]:
    """Offsets in ``mem``: the public state, then the public clip and slew counts and the
    marker of where the previous outputs are; the 64-byte aligned work rows; the total."""
    n_state = n_chains * n_sections * channels * 2
    n_counts = 2 * n_chains * n_sections + 1
    work = -(-(n_state + n_counts) // 8) * 8
    n_groups = -(-n_chains * channels // _WIDTH)
    n_work = n_groups * (n_sections + 1) * _MEM_BLOCK + _CHUNK_FRAMES * n_groups * _WIDTH
    return n_state, work, work + n_work


_layout = njit(_memory_layout)


@njit(cache=True, nogil=True)
def _run_block(x, out, sec, mem):
    """Filter ``x`` (frames, channels) through every chain into ``out`` (chains, frames, ch).

    ``mem`` starts with the public state (chains, sections, channels, 2), clip counts and slew
    counts (chains, sections each), read before and written after the block, and the marker
    ``recall``: 0 when every section's ``_PREV`` holds its last output, ``r + 1`` when row
    ``r`` of the next slot's input rows does (after a block without slew limits), -1 when
    they are zero (after a reset). The work rows and the staging area follow. Returns the
    number of chains reset for non-finite values, or -1 if the shapes disagree.
    """
    frames, channels = x.shape
    n_chains = out.shape[0]
    n_groups = -(-n_chains * channels // _WIDTH)
    n_sections = sec.shape[0] // (n_groups * _SEC_BLOCK)
    n_state, start_work, size = _layout(n_chains, n_sections, channels)
    recall = n_state + 2 * n_chains * n_sections
    if (
        out.shape[1] != frames
        or out.shape[2] != channels
        or sec.shape[0] != n_groups * n_sections * _SEC_BLOCK
        or mem.shape[0] != size
    ):
        return -1
    work = mem[start_work:]
    width = n_groups * _WIDTH
    stage = n_groups * (n_sections + 1) * _MEM_BLOCK
    mode = 0.0
    for i in range(_KIND, sec.shape[0], _SEC_BLOCK):
        mode = max(mode, sec[i])
    limit = mode >= _CLAMP
    slew = mode == _SLEW
    _load_state(mem, n_chains, n_sections, channels, work)
    if slew and mem[recall] != 0.0:
        _recall_outputs(work, n_sections, n_groups, int(mem[recall]) - 1)
    if slew:
        mem[recall] = 0.0
    finite = True
    for start in range(0, frames, _CHUNK_FRAMES):
        n = min(_CHUNK_FRAMES, frames - start)
        _gather(x, start, n, n_chains, work, stage, width)
        if slew:
            finite &= _cascade_slewed(sec, work, n, n_sections, n_groups, stage)
        elif limit:
            finite &= _cascade_clamped(sec, work, n, n_sections, n_groups, stage)
        else:
            finite &= _cascade(sec, work, n, n_sections, n_groups, stage)
        if not slew:  # each section's last output is in this row of the next slot's input
            mem[recall] = 1.0 + (0 if n % _FRAMES_PER_STEP else _FRAMES_PER_STEP - 1)
        _scatter(out, start, n, work, stage, width)
        _flush(work, n_sections, n_groups)
    return _store_state(mem, n_sections, work, out, frames, finite, sec)


def _kernel_signature(dtype: type[np.floating]) -> tuple[types.Type, ...]:
    io = types.float32 if dtype is np.float32 else types.float64
    return (
        types.Array(io, 2, "A", readonly=True),
        types.Array(io, 3, "A"),
        types.Array(types.float64, 1, "C"),
        types.Array(types.float64, 1, "C"),
    )


def warm_up() -> None:
    """Compile (or load from numba's on-disk cache) every kernel signature the runner uses.

    Call once before any stream starts; :class:`CascadeRunner` also calls it. Afterwards the
    kernel accepts exactly float32 and float64 blocks and never compiles on the audio path.
    The kernel (with the helpers it calls built in) is cached, so later processes only load it.
    """
    if len(_run_block.signatures) < 2:
        try:
            _compile_kernels()
        except Exception:  # an unreadable cache entry, e.g. written while this
            # file was imported under another module name: drop the cache and compile afresh
            _run_block._cache.flush()  # type: ignore[attr-defined]
            _compile_kernels()
    _run_block.disable_compile()


def _compile_kernels() -> None:
    for dtype in (np.float32, np.float64):
        _run_block.compile(_kernel_signature(dtype))


# --- validation -------------------------------------------------------------------------------


def validate_sos(sos: object) -> np.ndarray:
    """Check second-order sections and return them as a new ``(n, 6)`` float64 array.

    Parameters
    ----------
    sos : array_like
        Sections ``[b0, b1, b2, a0, a1, a2]`` per row, as made by
        ``scipy.signal.butter(..., output='sos')``.

    Returns
    -------
    numpy.ndarray
        The sections, float64, shape ``(n, 6)`` with ``n >= 1``.

    Raises
    ------
    TypeError
        If ``sos`` is not real-valued numbers.
    ValueError
        If the shape is not ``(n, 6)`` with ``n >= 1``, a value is not finite, or a row's
        ``a0`` is not exactly 1.

    References
    ----------
    scipy.signal.sosfilt: the same section layout and the same ``a0 == 1`` rule.

    Examples
    --------
    >>> from scipy.signal import butter
    >>> validate_sos(butter(4, 0.1, output="sos")).shape
    (2, 6)
    """
    array = np.asarray(sos)
    if array.dtype.kind not in "biuf":
        raise TypeError(f"sos must hold real numbers, got dtype {array.dtype}")
    array = np.array(array, dtype=np.float64)
    if array.ndim != 2 or array.shape[0] < 1 or array.shape[1] != 6:
        raise ValueError(f"sos must have shape (n_sections >= 1, 6), got {array.shape}")
    if not np.all(np.isfinite(array)):
        raise ValueError("sos values must be finite; found NaN or inf")
    bad_rows = np.flatnonzero(array[:, 3] != 1.0)
    if bad_rows.size:
        row = int(bad_rows[0])
        raise ValueError(
            f"sos a0 (column 3) must be 1 in every row; row {row} has a0={float(array[row, 3])}; "
            "divide that row by its a0"
        )
    return array


def _validate_levels(
    levels: object, n_sections: int, chain: int, what: str = "clip levels"
) -> np.ndarray:
    array = np.array(levels, dtype=np.float64)
    if array.shape != (n_sections,):
        raise ValueError(
            f"{what} of chain {chain} must have shape ({n_sections},), one per section, "
            f"got {array.shape}"
        )
    if np.any(np.isnan(array)) or np.any(array <= 0.0):
        raise ValueError(
            f"{what} of chain {chain} must be > 0 full-scale units (np.inf = no limit), "
            f"got {array.tolist()}"
        )
    return array


def _per_chain(
    values: Sequence[np.ndarray] | None, n_sections: tuple[int, ...], name: str, what: str
) -> list[np.ndarray]:
    """One validated array per chain, one value per section (``np.inf`` where None)."""
    if values is None:
        return [np.full(n, np.inf) for n in n_sections]
    if len(values) != len(n_sections):
        raise ValueError(
            f"{name} must have one array per chain ({len(n_sections)}), got {len(values)}"
        )
    return [
        _validate_levels(value, n, chain, what)
        for chain, (value, n) in enumerate(zip(values, n_sections, strict=True))
    ]


def _mark_kinds(sec4: np.ndarray) -> None:
    """Write each (lane group, section)'s kind from its lanes' limits: ``_SLEW`` where a lane
    has a slew step below twice its swing level (a clamped output never steps further, so a
    larger step never acts), else ``_CLAMP`` where a lane has a finite level, else ``_PLAIN``."""
    level = sec4[:, :, _LEVEL // _WIDTH, :]
    step = sec4[:, :, _STEP // _WIDTH, :]
    slew = np.any(step < 2.0 * level, axis=-1)
    clamp = np.any(level < np.inf, axis=-1)
    kind = np.where(slew, _SLEW, np.where(clamp, _CLAMP, _PLAIN))
    sec4[:, :, _KIND // _WIDTH, :] = kind[:, :, np.newaxis]


def _aligned_zeros(size: int) -> np.ndarray:
    """float64 zeros starting on a 64-byte boundary, so no vector access splits a cache line."""
    spare = 64 // 8
    buffer = np.zeros(size + spare)
    skip = (-buffer.ctypes.data % 64) // 8
    return buffer[skip : skip + size]


def _positive_int(value: object, name: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int | np.integer):
        raise TypeError(f"{name} must be an int, got {type(value).__name__}")
    if value < 1:
        raise ValueError(f"{name} must be >= 1, got {value}")
    return int(value)


# --- runner -----------------------------------------------------------------------------------


class CascadeRunner:
    """Stateful runner for several cascades of biquads over the same multi-channel stream.

    Parameters
    ----------
    chains : sequence of array_like
        One SOS array ``(n_i, 6)`` with ``a0 == 1`` per chain; chains may differ in ``n_i``.
    channels : int
        Channels of every input block.
    max_frames : int
        Largest block, in frames, for :meth:`process` without ``out`` (the size of the
        runner's own output buffer). With ``out`` given, blocks may be of any length.
    clip_levels : sequence of array_like, optional
        Per chain, one level per section in full-scale units: that section's output is
        clamped to +/- level (``np.inf`` means no limit). Default: no limits.
    slew_steps : sequence of array_like, optional
        Per chain, one step per section in full-scale units per sample: that section's output
        changes by at most this much from one sample to the next (a slew rate in full-scale
        units per second divided by the rate; ``np.inf`` means no limit). See the module
        docstring for the model. Default: no limits.
    dtype : {numpy.float64, numpy.float32}
        Sample type of input and output blocks. The filter always computes in float64.

    Attributes
    ----------
    n_chains, channels, max_frames : int
        As constructed.
    n_sections : tuple of int
        Sections per chain; ``max_sections = max(n_sections)``.
    dtype : numpy.dtype
        Sample type of input and output blocks.
    state : numpy.ndarray
        float64 ``(n_chains, max_sections, channels, 2)``, every section's ``z0, z1`` (see the
        property).
    clip_counts : numpy.ndarray
        int64 ``(n_chains, max_sections)``, samples clamped so far (see the property).
    slew_counts : numpy.ndarray
        int64 ``(n_chains, max_sections)``, samples whose step was limited so far.
    nonfinite_resets : int
        Blocks found non-finite (NaN or inf in the input or in a chain's state) so far.

    Raises
    ------
    TypeError, ValueError
        For arguments of the wrong kind or value, naming the argument and the rule.

    References
    ----------
    scipy.signal.sosfilt: the filter structure (transposed direct form II) and its order of
    operations, reproduced exactly.
    P. Horowitz, W. Hill, The Art of Electronics, 3rd ed., chapter 4 (op-amp slew rate and
    full-power bandwidth): the output's rate of change is limited to the slew rate.

    Examples
    --------
    >>> import numpy as np
    >>> from scipy.signal import butter
    >>> low = butter(4, 0.05, output="sos")
    >>> high = butter(4, 0.05, btype="high", output="sos")
    >>> runner = CascadeRunner([low, high], channels=2, max_frames=64)
    >>> runner.process(np.zeros((64, 2))).shape
    (2, 64, 2)
    """

    def __init__(
        self,
        chains: Sequence[np.ndarray],
        channels: int,
        max_frames: int,
        clip_levels: Sequence[np.ndarray] | None = None,
        dtype: type[np.floating] | np.dtype = np.float64,
        slew_steps: Sequence[np.ndarray] | None = None,
    ) -> None:
        sos_list = [validate_sos(sos) for sos in chains]
        if not sos_list:
            raise ValueError("chains must hold at least one SOS array")
        self.channels = _positive_int(channels, "channels")
        self.max_frames = _positive_int(max_frames, "max_frames")
        self.dtype = np.dtype(dtype)
        if self.dtype not in (np.dtype(np.float32), np.dtype(np.float64)):
            raise ValueError(f"dtype must be float32 or float64, got {self.dtype}")
        self.n_chains = len(sos_list)
        self.n_sections = tuple(sos.shape[0] for sos in sos_list)
        levels = _per_chain(clip_levels, self.n_sections, "clip_levels", "clip levels")
        steps = _per_chain(slew_steps, self.n_sections, "slew_steps", "slew steps")
        warm_up()
        self._allocate()
        for chain, (sos, level, step) in enumerate(zip(sos_list, levels, steps, strict=True)):
            self._write_chain(self._sec4, chain, sos, level, step)
        _mark_kinds(self._sec4)
        self.nonfinite_resets = 0

    def _allocate(self) -> None:
        """Make every buffer the kernel touches, and index arrays from (chain, ch) to lanes."""
        n_sec = max(self.n_sections)
        lane = np.arange(self.n_chains * self.channels).reshape(self.n_chains, self.channels)
        n_groups = -(-lane.size // _WIDTH)
        self._group, self._lane = np.divmod(lane, _WIDTH)

        self._sec = _aligned_zeros(n_groups * n_sec * _SEC_BLOCK)
        self._spare = _aligned_zeros(self._sec.size)
        self._sec4 = self._sec.reshape(n_groups, n_sec, _SEC_ROWS, _WIDTH)
        self._spare4 = self._spare.reshape(n_groups, n_sec, _SEC_ROWS, _WIDTH)
        self._sec4[:, :, 0, :] = 1.0  # pass-through sections pad short chains and spare lanes
        self._sec4[:, :, _LEVEL // _WIDTH : _KIND // _WIDTH, :] = np.inf

        n_state, _, size = _memory_layout(self.n_chains, n_sec, self.channels)
        self._mem = _aligned_zeros(size)
        self._state = self._mem[:n_state].reshape(self.n_chains, n_sec, self.channels, 2)
        n_counts = self.n_chains * n_sec
        counts = self._mem[n_state : n_state + 2 * n_counts]
        self._counts = counts[:n_counts].reshape(self.n_chains, n_sec)
        self._slews = counts[n_counts:].reshape(self.n_chains, n_sec)
        self._recall = n_state + 2 * n_counts

        self._out = np.zeros((self.n_chains, self.max_frames, self.channels), dtype=self.dtype)
        self._views: dict[int, np.ndarray] = {}

    def _write_chain(
        self, sec4: np.ndarray, chain: int, sos: np.ndarray, level: np.ndarray, step: np.ndarray
    ) -> None:
        g = self._group[chain][:, None]
        w = self._lane[chain][:, None]
        s = np.arange(sos.shape[0])[None, :]
        for row, column in enumerate((0, 1, 2, 4, 5)):
            sec4[g, s, row, w] = sos[:, column]
        sec4[g, s, _LEVEL // _WIDTH, w] = level
        sec4[g, s, _STEP // _WIDTH, w] = step

    def _chain_row(self, index: int, row: int) -> np.ndarray:
        """A copy of one coefficient row (level or step) of a chain, one value per section."""
        return self._sec4[self._group[index, 0], : self.n_sections[index], row // _WIDTH,
                          self._lane[index, 0]].copy()  # fmt: skip

    @property
    def state(self) -> np.ndarray:
        """float64 ``(n_chains, max_sections, channels, 2)``: every section's ``z0, z1``.

        The runner's own array: read it between blocks, or write into it
        (``runner.state[chain, :n] = ...``) to set the state the next block starts from.
        Sections beyond a shorter chain's count stay zero.
        """
        return self._state

    @property
    def clip_counts(self) -> np.ndarray:
        """int64 ``(n_chains, max_sections)``: samples clamped so far, summed over channels."""
        return self._counts.astype(np.int64)

    @property
    def slew_counts(self) -> np.ndarray:
        """int64 ``(n_chains, max_sections)``: samples whose step was limited to the slew
        step so far, summed over channels."""
        return self._slews.astype(np.int64)

    def process(self, block: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        """Filter one block through every chain, carrying the state to the next call.

        Parameters
        ----------
        block : numpy.ndarray
            ``(frames, channels)`` of the runner's dtype, ``frames <= max_frames``. Not changed.
        out : numpy.ndarray, optional
            ``(n_chains, frames, channels)`` of the runner's dtype to write into.

        Returns
        -------
        numpy.ndarray
            ``out``, or when it is None a view of the runner's own buffer, valid until the
            next call.

        Raises
        ------
        TypeError
            If ``block`` or ``out`` is not a 2-D / 3-D array of the runner's dtype.
        ValueError
            If a shape does not match the runner.
        """
        if out is None:
            out = self._views.get(len(block))
            if out is None:
                out = self._make_view(block)
        elif np.shape(out)[::2] != (self.n_chains, self.channels):
            raise ValueError(self._shape_problem(block, out))
        try:
            n_reset = _run_block(block, out, self._sec, self._mem)
        except TypeError:
            raise TypeError(self._type_problem(block, out)) from None
        if n_reset:
            if n_reset < 0:
                raise ValueError(self._shape_problem(block, out))
            self.nonfinite_resets += 1
        return out

    def process_inplace(self, block: np.ndarray) -> None:
        """Filter ``block`` (frames, channels) in place; only for a runner with one chain."""
        if self.n_chains != 1:
            raise ValueError(
                f"process_inplace needs a runner with one chain, this one has {self.n_chains}; "
                "use process"
            )
        self.process(block, block[np.newaxis])

    def set_chain(
        self,
        index: int,
        sos: np.ndarray,
        clip_levels: np.ndarray | None = None,
        slew_steps: np.ndarray | None = None,
    ) -> None:
        """Swap one chain's coefficients (and optionally its limits), keeping its state.

        The swap takes effect whole between two blocks, never within one: the new values go to
        a spare buffer that replaces the active one in a single attribute store, and the
        kernel holds the GIL while it runs, so a control thread may call this while another
        thread calls :meth:`process`.

        Parameters
        ----------
        index : int
            Chain to change, ``0 <= index < n_chains``.
        sos : array_like
            New sections, the same count as the chain had at construction.
        clip_levels : array_like, optional
            New per-section levels; None keeps the chain's current levels.
        slew_steps : array_like, optional
            New per-section slew steps; None keeps the chain's current steps.

        Raises
        ------
        ValueError
            If ``index`` is out of range, ``sos`` is invalid or has another section count,
            or ``clip_levels`` or ``slew_steps`` is invalid.
        """
        if not 0 <= index < self.n_chains:
            raise ValueError(f"index must be 0 <= index < {self.n_chains}, got {index}")
        new = validate_sos(sos)
        n = self.n_sections[index]
        if new.shape[0] != n:
            raise ValueError(
                f"set_chain needs {n} sections for chain {index} (as at construction), "
                f"got {new.shape[0]}; build a new runner to change the section count"
            )
        if clip_levels is None:
            level = self._chain_row(index, _LEVEL)
        else:
            level = _validate_levels(clip_levels, n, index)
        if slew_steps is None:
            step = self._chain_row(index, _STEP)
        else:
            step = _validate_levels(slew_steps, n, index, "slew steps")
        np.copyto(self._spare4, self._sec4)
        self._write_chain(self._spare4, index, new, level, step)
        _mark_kinds(self._spare4)
        # one attribute store: a block sees either the old or the new coefficients, whole
        self._sec, self._spare = self._spare, self._sec
        self._sec4, self._spare4 = self._spare4, self._sec4

    def _output_rows(self) -> tuple[np.ndarray, int]:
        """The work rows as (groups, sections + 1, rows, lanes), and the row holding each
        section's previous output (``_PREV``, or the next slot's input row the marker names;
        -1: zero)."""
        n_sec = max(self.n_sections)
        _, start, _ = _memory_layout(self.n_chains, n_sec, self.channels)
        n_groups = self._sec4.shape[0]
        rows = self._mem[start : start + n_groups * (n_sec + 1) * _MEM_BLOCK]
        marker = int(self._mem[self._recall])
        row = (
            _PREV // _WIDTH if marker == 0 else -1 if marker < 0 else _INPUT // _WIDTH + marker - 1
        )
        return rows.reshape(n_groups, n_sec + 1, _MEM_BLOCK // _WIDTH, _WIDTH), row

    @property
    def last_outputs(self) -> np.ndarray:
        """float64 ``(n_chains, max_sections, channels)``: every section's last output, which
        a slew limit moves from (a copy). With :attr:`state`, what a new runner needs to
        continue a chain; write it with :meth:`set_last_outputs`."""
        rows, row = self._output_rows()
        n_sec = max(self.n_sections)
        out = np.zeros((self.n_chains, n_sec, self.channels))
        if row < 0:
            return out
        slot = 1 if row != _PREV // _WIDTH else 0  # outputs sit in the next slot's input rows
        for chain in range(self.n_chains):
            g, w = self._group[chain], self._lane[chain]
            out[chain] = rows[g[None, :], np.arange(n_sec)[:, None] + slot, row, w[None, :]]
        return out

    def set_last_outputs(self, values: np.ndarray) -> None:
        """Set every section's last output (as :attr:`last_outputs` gives it), before the
        runner is in use by another thread."""
        current = self.last_outputs
        current[...] = values
        rows, _ = self._output_rows()
        n_sec = max(self.n_sections)
        for chain in range(self.n_chains):
            g, w = self._group[chain], self._lane[chain]
            rows[g[None, :], np.arange(n_sec)[:, None], _PREV // _WIDTH, w[None, :]] = current[
                chain
            ]
        self._mem[self._recall] = 0.0

    def reset(self) -> None:
        """Set every section's state and previous output to zero (the counts are kept)."""
        self._state[...] = 0.0
        self._mem[self._recall] = -1.0

    def _make_view(self, block: np.ndarray) -> np.ndarray:
        frames = np.shape(block)[0]
        if not 0 <= frames <= self.max_frames:
            raise ValueError(
                f"block has {frames} frames, more than max_frames={self.max_frames}; "
                "split it or build the runner with a larger max_frames"
            )
        # one contiguous block for any length (not a slice of the full one): the kernels that
        # take the output next see one layout, and compile no new version for a short block
        view = self._out.reshape(-1)[: self.n_chains * frames * self.channels]
        view = view.reshape(self.n_chains, frames, self.channels)
        self._views[frames] = view
        return view

    def _type_problem(self, block: object, out: object) -> str:
        for name, value, ndim in (("block", block, 2), ("out", out, 3)):
            if not isinstance(value, np.ndarray) or value.ndim != ndim:
                return f"{name} must be a {ndim}-D numpy array"
            if value.dtype != self.dtype:
                return (
                    f"{name} has dtype {value.dtype}, this runner was built for {self.dtype}; "
                    f"convert with .astype(np.{self.dtype}) or build it with that dtype"
                )
        return "block and out must be native-byte-order, aligned arrays; out must be writable"

    def _shape_problem(self, block: np.ndarray, out: np.ndarray) -> str:
        if np.ndim(block) != 2 or np.shape(block)[1] != self.channels:
            return f"block must have shape (frames, {self.channels}), got {np.shape(block)}"
        want = (self.n_chains, block.shape[0], self.channels)
        return f"out must have shape {want}, got {np.shape(out)}"


def sosfilt_blocks(
    sos: np.ndarray, x: np.ndarray, zi: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Filter ``x`` along axis 0 with one cascade; the same as ``scipy.signal.sosfilt``.

    Parameters
    ----------
    sos : array_like
        ``(n_sections, 6)`` sections with ``a0 == 1``.
    x : array_like
        ``(frames,)`` or ``(frames, channels)`` samples.
    zi : array_like, optional
        Initial state in scipy's layout for axis 0: ``(n_sections, 2)`` for 1-D ``x``,
        ``(n_sections, 2, channels)`` for 2-D ``x``. Default zeros.

    Returns
    -------
    y : numpy.ndarray
        float64, the shape of ``x``.
    zf : numpy.ndarray
        Final state, the layout of ``zi``.

    Raises
    ------
    ValueError
        If ``sos``, ``x`` or ``zi`` has the wrong shape, or ``sos`` is invalid.

    References
    ----------
    scipy.signal.sosfilt(sos, x, axis=0, zi=zi), which this reproduces bit for bit in float64.

    Examples
    --------
    >>> import numpy as np
    >>> from scipy.signal import butter
    >>> y, zf = sosfilt_blocks(butter(2, 0.1, output="sos"), np.ones(4))
    >>> zf.shape
    (1, 2)
    """
    sos = validate_sos(sos)
    samples = np.asarray(x, dtype=np.float64)
    if samples.ndim not in (1, 2):
        raise ValueError(f"x must be 1-D (frames,) or 2-D (frames, channels), got {samples.shape}")
    block = samples.reshape(samples.shape[0], -1)
    channels = block.shape[1]
    runner = CascadeRunner([sos], channels=channels, max_frames=max(block.shape[0], 1))
    zf_shape = (sos.shape[0], 2) + samples.shape[1:]
    if zi is not None:
        initial = np.asarray(zi, dtype=np.float64)
        if initial.shape != zf_shape:
            raise ValueError(f"zi must have shape {zf_shape}, got {initial.shape}")
        runner.state[0] = initial.reshape(sos.shape[0], 2, channels).transpose(0, 2, 1)
    y = runner.process(block)[0].reshape(samples.shape).copy()
    zf = runner.state[0].transpose(0, 2, 1).reshape(zf_shape).copy()
    return y, zf
