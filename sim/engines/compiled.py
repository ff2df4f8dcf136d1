"""The array engines' passes over a batch, compiled with numba.

A season touches each individual once (``individual``: a uniform from its
replicate's stream decides its survival, and a survivor moves on, one year
older, into the next census) or each class once (``counts``: its survivors
are binomial). In numpy that costs Python calls per replicate per season
(about a microsecond each, as much as drawing for 200 individuals);
compiled, one pass walks every replicate of a batch.

The draws are numpy's own: each replicate's uniforms come from its
``numpy.random.Generator``'s bit generator through numpy's C interface (the
``bitgen_t`` struct behind ``BitGenerator.capsule``, whose ``next_double`` is
the function ``Generator.random`` calls), so a replicate's stream is consumed
exactly as ``Generator.random`` would consume it, and numpy calls on the same
generator before and after carry on from where the pass stopped.
"""

from __future__ import annotations

import ctypes
import math

import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.extending import intrinsic

__all__ = ["DRAW_LIMIT", "bitgen_addresses", "poisson", "binomial", "survive", "survive_counts",
           "next_census", "survive_to_census"]

# The largest expected number a class's births or recruits are drawn with. A season can
# overshoot a population by a factor of the fecundity (1e12, 1e300...); such a replicate ends
# capped (its census passes max_population <= 2**32 - 1) whatever it drew beyond this, and
# numpy's draws fail, or overflow int64, far above it.
DRAW_LIMIT = 1e12

_capsule_pointer = ctypes.pythonapi.PyCapsule_GetPointer
_capsule_pointer.restype = ctypes.c_void_p
_capsule_pointer.argtypes = [ctypes.py_object, ctypes.c_char_p]

# numpy/random/bitgen.h: struct bitgen { void *state; next_uint64; next_uint32; next_double; next_raw }
_STATE, _NEXT_DOUBLE = 0, 3


def _compiled(function):
    """``numba.njit`` with the compiled code cached on disk where numba finds a writable place
    (beside the module, or the user's cache directory; ``NUMBA_CACHE_DIR`` chooses another);
    where it finds none (a read-only install and no writable home), compiled in each process."""
    try:
        return njit(cache=True, nogil=True)(function)
    except RuntimeError:  # numba: "cannot cache function ...: no locator available"
        return njit(nogil=True)(function)


def bitgen_addresses(rngs) -> np.ndarray:
    """The address of each generator's ``bitgen_t`` (valid while the generator lives)."""
    return np.array([_capsule_pointer(g.bit_generator.capsule, b"BitGenerator") for g in rngs],
                    dtype=np.uintp)


@intrinsic
def _next_double(typingctx, bitgen):
    """``bitgen->next_double(bitgen->state)``: the generator's next uniform on [0, 1)."""
    sig = types.float64(types.uintp)

    def codegen(context, builder, signature, args):
        void_ptr = ir.IntType(8).as_pointer()
        fields = builder.inttoptr(args[0], void_ptr.as_pointer())
        state = builder.load(builder.gep(fields, [ir.Constant(ir.IntType(32), _STATE)]))
        function = builder.load(builder.gep(fields, [ir.Constant(ir.IntType(32), _NEXT_DOUBLE)]))
        function_type = ir.FunctionType(ir.DoubleType(), [void_ptr])
        return builder.call(builder.bitcast(function, function_type.as_pointer()), [state])

    return sig, codegen


# Stirling series for log Gamma(x): B_2k / (2k (2k - 1)), k = 1..10 (Abramowitz & Stegun 6.1.40)
_STIRLING = np.array([8.333333333333333e-02, -2.777777777777778e-03, 7.936507936507937e-04,
                      -5.952380952380952e-04, 8.417508417508418e-04, -1.917526917526918e-03,
                      6.410256410256410e-03, -2.955065359477124e-02, 1.796443723688307e-01,
                      -1.39243221690590e+00])
_LOG_2PI = 1.8378770664093453


@_compiled
def _log_gamma(x):
    """log Gamma(x) for x >= 1 by the Stirling series, shifted up to x >= 7 by the recurrence
    (numpy draws Poisson variates with this same series, so acceptances agree to the bit)."""
    if x == 1.0 or x == 2.0:
        return 0.0
    shift = int(7.0 - x) if x < 7.0 else 0
    x0 = x + shift
    x2 = (1.0 / x0) * (1.0 / x0)
    series = _STIRLING[9]
    for j in range(8, -1, -1):
        series = series * x2 + _STIRLING[j]
    out = series / x0 + 0.5 * _LOG_2PI + (x0 - 0.5) * np.log(x0) - x0
    for _ in range(shift):
        out -= np.log(x0 - 1.0)
        x0 -= 1.0
    return out


@_compiled
def poisson(bitgen, mean):
    """A Poisson(mean) draw from the generator at ``bitgen``.

    Hoermann's transformed rejection with squeeze (PTRS; Hoermann 1993,
    Insurance: Mathematics and Economics 12, 39-45) for mean >= 10; below,
    the product of uniforms against exp(-mean) (Knuth, TAOCP vol. 2,
    3.4.1); mean 0 draws nothing. These are the methods and the order of
    uniforms of numpy's ``Generator.poisson``, so the draw is the one numpy
    would make from the same stream (tests/test_compiled.py checks it).
    """
    if mean == 0.0:
        return 0
    if mean < 10.0:
        limit = np.exp(-mean)
        k = 0
        product = _next_double(bitgen)
        while product > limit:
            k += 1
            product *= _next_double(bitgen)
        return k
    root, log_mean = np.sqrt(mean), np.log(mean)
    b = 0.931 + 2.53 * root
    a = -0.059 + 0.02483 * b
    inv_alpha = 1.1239 + 1.1328 / (b - 3.4)
    v_r = 0.9277 - 3.6224 / (b - 2.0)
    while True:
        u = _next_double(bitgen) - 0.5
        v = _next_double(bitgen)
        us = 0.5 - abs(u)
        k = int(np.floor((2.0 * a / us + b) * u + mean + 0.43))
        if us >= 0.07 and v <= v_r:
            return k  # the squeeze: accepted without the density
        if k < 0 or (us < 0.013 and v > us):
            continue
        if (np.log(v) + np.log(inv_alpha) - np.log(a / (us * us) + b)
                <= -mean + k * log_mean - _log_gamma(k + 1.0)):
            return k


@_compiled
def binomial(bitgen, n, p):
    """A Binomial(n, p) draw from the generator at ``bitgen``, by inversion.

    Exact up to double rounding (Devroye 1986, ch. II.2 and X.4). For p > 1/2
    it draws the failures. With mean n p < 30 the search runs up from 0
    (the pmf by its recurrence from (1 - p)^n); above, it runs outward from
    the mode, alternating below and above (Kemp 1986's search from the mode),
    so it takes about a standard deviation of steps. A uniform past the
    total the rounded pmfs reach is drawn again.
    """
    if n <= 0 or p <= 0.0:
        return 0
    if p >= 1.0:
        return n
    if p > 0.5:
        return n - binomial(bitgen, n, 1.0 - p)
    q = 1.0 - p
    ratio = p / q
    if n * p < 30.0:
        first = np.exp(n * np.log1p(-p))
        while True:
            u = _next_double(bitgen)
            pmf = first
            for k in range(n + 1):
                if u < pmf:
                    return k
                u -= pmf
                pmf *= ratio * (n - k) / (k + 1.0)
    mode = int((n + 1) * p)
    at_mode = np.exp(math.lgamma(n + 1.0) - math.lgamma(mode + 1.0) - math.lgamma(n - mode + 1.0)
                     + mode * np.log(p) + (n - mode) * np.log1p(-p))
    while True:
        u = _next_double(bitgen)
        if u < at_mode:
            return mode
        u -= at_mode
        low, low_pmf = mode, at_mode  # the last k searched below the mode, and its pmf
        high, high_pmf = mode, at_mode
        while low > 0 or high < n:
            if low > 0:
                low_pmf *= low / ((n - low + 1.0) * ratio)
                low -= 1
                if u < low_pmf:
                    return low
                u -= low_pmf
            if high < n:
                high_pmf *= ratio * (n - high) / (high + 1.0)
                high += 1
                if u < high_pmf:
                    return high
                u -= high_pmf


@_compiled
def survive_counts(counts, bitgens, survival, factor, aged, out, recruit_means, recruits):
    """Survivors of every replicate's classes, binomial, moved to their next class in ``out``
    (zeros, the shape of ``counts``); then, where ``recruit_means`` has columns, each
    replicate's recruits of each allele, Poisson with that mean (at most ``DRAW_LIMIT``), into
    ``recruits``."""
    for r in range(counts.shape[0]):
        g = bitgens[r]
        f = factor[r]
        for c in range(counts.shape[1]):
            n = counts[r, c]
            if n > 0 and survival[c] > 0.0:
                out[r, aged[c]] += binomial(g, n, survival[c] * f)
        for allele in range(recruit_means.shape[1]):
            recruits[r, allele] = poisson(g, min(recruit_means[r, allele], DRAW_LIMIT))


@_compiled
def survive(cell, slice_sizes, drawn, bitgens, survival, factor, aged, out, survivors, by_class,
            recruit_means, recruits):
    """Survival of every individual of a batch, in one pass; returns the number of survivors.

    Parameters
    ----------
    cell : ndarray of unsigned int
        Each individual's class; replicates own consecutive slices.
    slice_sizes : ndarray of int64
        Length of each slice of ``cell``.
    drawn : ndarray of bool, one per slice
        Slices whose replicate is still in the batch; the others (left
        replicates) are skipped, drawing nothing.
    bitgens : ndarray of uintp, one per drawn slice
        ``bitgen_addresses`` of their generators.
    survival : ndarray of float64
        Survival probability by class.
    factor : ndarray of float64, one per drawn slice
        The replicate's density factor on adult survival (1 where none acts).
    aged : ndarray, cell's dtype
        The class a survivor moves to.
    out : ndarray, cell's dtype, at least as long as the drawn slices
        Receives the aged survivors, replicate after replicate, in order.
    survivors : ndarray of int64, one per drawn slice
        Receives each replicate's number of survivors.
    by_class : ndarray of int64, (drawn slices, classes), zeros
        Receives each replicate's survivors by their new class.
    recruit_means, recruits : ndarray, (drawn slices, alleles) float64 and int64
        Where ``recruit_means`` has columns, each replicate then draws its
        recruits of each allele, Poisson with that mean (at most ``DRAW_LIMIT``), into ``recruits``
        (shape (drawn slices, 0): no recruits drawn here).

    Individual i of a replicate survives when its uniform u_i < survival[c] *
    factor (the comparison the numpy form ``u < threshold`` makes).
    """
    i = 0
    n = 0
    r = 0
    for s in range(slice_sizes.size):
        size = slice_sizes[s]
        if not drawn[s]:
            i += size
            continue
        g = bitgens[r]
        f = factor[r]
        start = n
        for _ in range(size):
            c = cell[i]
            a = aged[c]
            alive = _next_double(g) < survival[c] * f
            out[n] = a  # written always, kept by advancing n: no branch to mispredict
            n += alive
            by_class[r, a] += alive
            i += 1
        survivors[r] = n - start
        for allele in range(recruit_means.shape[1]):
            recruits[r, allele] = poisson(g, min(recruit_means[r, allele], DRAW_LIMIT))
        r += 1
    return n


@_compiled
def next_census(survived, survivors, recruits, first, limit, by_class, sizes, born, over, weights,
                index):
    """The next census of a batch (the ``individual`` engine's cells), and what it holds.

    Per replicate: its survivors (consecutive by replicate in ``survived``),
    then ``recruits[r, allele]`` recruits of class ``first[allele]``, who are
    also added to ``by_class``. A replicate whose survivors and recruits pass
    ``limit`` keeps its recruits in ``by_class`` but gets no cells for them
    (the run stops it as capped: an exploding population never sizes the array).
    Each replicate's number of cells, its recruits, and whether it passed
    ``limit`` are written into ``sizes``, ``born`` and ``over``; its census's
    density index, sum over classes of ``by_class`` x ``weights`` (the kernel's
    ``density_index``: exact for whole weights, as the census's are), into ``index``.

    Returns
    -------
    ndarray
        The next census's cells (``survived``'s dtype).
    """
    n_reps = survivors.size
    total = 0
    for r in range(n_reps):
        born[r] = 0
        for allele in range(first.size):
            born[r] += recruits[r, allele]
            by_class[r, first[allele]] += recruits[r, allele]
        over[r] = survivors[r] + born[r] > limit
        sizes[r] = survivors[r] + (0 if over[r] else born[r])
        total += sizes[r]
        d = 0.0
        for c in range(weights.size):
            d += by_class[r, c] * weights[c]
        index[r] = d
    cell = np.empty(total, survived.dtype)
    i = 0
    n = 0
    for r in range(n_reps):  # block copies and fills (memcpy- and memset-like loops)
        k = survivors[r]
        cell[n:n + k] = survived[i:i + k]
        n += k
        i += k
        if over[r]:
            continue
        for allele in range(first.size):
            k = recruits[r, allele]
            cell[n:n + k] = first[allele]
            n += k
    return cell


@_compiled
def survive_to_census(cell, slice_sizes, drawn, bitgens, survival, factor, aged, survivors,
                      by_class, recruit_means, recruits, first, limit, sizes, born, over, weights,
                      index):
    """``survive`` then ``next_census`` in one call, where the recruits the pass draws go into
    the census as drawn; the arguments are theirs (the survivors' cells are the pass's own).

    A small population's season costs little more than its calls: one saved is a
    few microseconds a season.
    """
    survived = np.empty(cell.size, cell.dtype)
    survive(cell, slice_sizes, drawn, bitgens, survival, factor, aged, survived, survivors,
            by_class, recruit_means, recruits)
    return next_census(survived, survivors, recruits, first, limit, by_class, sizes, born, over,
                       weights, index)
