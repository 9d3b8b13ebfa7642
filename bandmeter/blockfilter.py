"""Block state-space filtering of cascades of second-order sections (SOS), at BLAS speed.

A cascade of ``N`` second-order sections is a linear system with ``2 N`` states. Run sample
by sample (``scipy.signal.sosfilt``) it costs some 20 multiply-adds per sample, but every
sample waits for the previous one, so the processor is latency-bound: about 7 ns per sample
for 4 sections on the development machine. :class:`_BlockKernel` regroups the same
arithmetic into matrix products over frames of samples (see its notes), which cost about
twice the multiply-adds but run at BLAS throughput. One run at 48 kHz, blocks of 131072
samples, one core: 3.1 ns per sample and cascade for the bank's 4 full-rate band filters
together, 3.3 ns for the A and C weightings together, 3.8 ns for the A weighting (4
sections) alone, against 7.2 ns for sosfilt in the same run. The fractional-octave bank
(:mod:`bandmeter.filterbank`) runs its band filters through it in groups,
:class:`SosFilter` runs one cascade and :class:`MultiSosFilter` several cascades of one
input (the A and C frequency weightings, :mod:`bandmeter.weighting`): on one kernel A and C
take 0.86-0.91 of the time of a kernel each at 44.1, 48 and 96 kHz (medians of interleaved
runs), as the products cover both and the per-call costs are paid once.

Speed notes
    The time goes into the output products (about half of the bank's time), the sub-frame
    steps and the frame recurrence; the kernel is bound by arithmetic and cache traffic,
    not by Python. The frames of a block are read from the input in place: only a block
    that ends inside a frame has its last chunk copied and zero padded, which saved about
    3 % of the bank's full-rate stage. The knobs ``_BLOCK_SUB``, ``_OUT_COLS``,
    ``_BLOCK_FRAME`` and ``_WORK_BYTES`` were measured in the whole bank at 48 kHz
    (sub-frames of 16 and 32, output chunks of 8, 16 and 32 columns, frames of 128, 256 and
    512, work arrays of 256 KiB to 4 MiB, interleaved runs): the defaults were fastest or
    within the noise, every other set 0-20 % slower. Fewer multiply-adds (sub-frames of 16:
    40 per band-sample instead of 46) do not pay for the doubled number of sub-frame steps;
    one product of 16 or 32 output columns costs more multiply-adds than it saves in calls;
    writing the outputs through a scratch array, or taking the output products band by
    band (to keep each band's rows in the cache), was slower.

State-space realisations
    :func:`_state_space` uses the state of ``sosfilt`` (transposed direct form II, the
    layout of sosfilt's ``zi``), so the filter bank can switch between the two kernels at
    any block. That realisation is poorly conditioned for a section whose two real poles
    lie close to z = 1 and whose zeros sit at z = 1, the low-frequency sections of the A and
    C weightings (double pole at 20.6 Hz: 0.9973 at 48 kHz, 0.9993 at 192 kHz): powers of
    its companion matrix grow like ``k p**k`` before they decay, and the block kernel then
    deviates from sosfilt by up to 2e-11 (48 kHz) or 1e-8 (192 kHz) of the output for
    noise with strong infrasound, and by 2.3e-11 on plain noise (C, 48 kHz): more than the
    1e-11 the first-use probe accepts. :func:`_cascade_state_space` realises such a section as
    two first-order high-passes, each the input minus a one-pole low-pass of it,

        l1' = p1 l1 + (1 - p1) x,   y1 = x - l1,
        l2' = p2 l2 + (1 - p2) y1,  y  = b0 (y1 - l2),

    which is ``b0 (1 - z**-1)**2 / ((1 - p1 z**-1)(1 - p2 z**-1))`` exactly: the states
    stay of the size of the signal (a low-pass of it), the transition matrix is triangular
    with a coupling of ``1 - p2`` (in its powers the diagonal never exceeds 1 and the
    coupling ``k (1 - p2) p**(k-1)`` never exceeds 0.37), and the block kernel
    is then as accurate as sosfilt itself or more. Against a long-double evaluation of the
    same sections (A and C at 8, 44.1, 48, 96 and 192 kHz; 40 000 samples of noise, noise
    with a 3 Hz tone and DC, pink noise, a tone at 0.97 x Nyquist: 40 cases, filtered by
    :class:`SosFilter` in one block) the block kernel's largest error is 3.5e-12 of the
    output maximum (C, 96 kHz, noise with infrasound; sosfilt 3.8e-12); it is below
    sosfilt's in 38 cases and within 1.7 times it in the other 2 (pink noise at 96 kHz);
    at 44.1 and 48 kHz it stays below 5.3e-13 (sosfilt: up to 1.8e-12), and where sosfilt
    errs most (C, 192 kHz, 0.97 x Nyquist: 3.7e-11) it errs by 2.7e-14.
    ``tests/test_blockfilter.py`` checks three of these cases against the long-double
    evaluation and every rate against sosfilt. Other sections keep the sosfilt
    realisation.

First-use probe
    Whatever the realisation, every kernel is checked on first use against
    ``scipy.signal.sosfilt`` on a seeded noise probe that runs every part of the block path
    (:func:`_probe_deviation` for the filter bank, :func:`_probe_cascades` for
    :class:`MultiSosFilter` and :class:`SosFilter`); a cascade that deviates by more than
    ``_BLOCK_TOL`` (1e-11 of the probe output) is filtered by sosfilt instead. A verdict
    is kept for the rest of the process (:func:`probe_once`): the next kernel of the same
    sections takes it without probing again. Such a kernel takes the first one's matrices
    too (:data:`_KERNEL_PARTS`), instead of building them again.

Subnormal numbers: filter states below 1e-200 are flushed (set to zero) within and after
each block, so that digital silence does not leave the arithmetic in slow subnormal numbers.

Threads: the products are narrow (8 to 64 output columns), and OpenBLAS would run the larger
ones on all its threads, which here doubles the CPU time (a thread spins between calls)
without shortening the wall time, and lengthens it on a busy machine. :func:`matmul_rows`
therefore cuts them into pieces of at most 2**18 multiply-adds, which OpenBLAS runs on the
calling thread whatever ``OPENBLAS_NUM_THREADS`` says (the filter bank's decimators and the
true-peak meter use it too).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from types import ModuleType

import numpy as np
from scipy import signal
from scipy.linalg import blas

from bandmeter.compiled import kernels
from bandmeter.errors import SettingsError
from bandmeter.numerics import flush_tiny

__all__ = ["MultiSosFilter", "SosFilter"]

#: Block path: samples per frame of the frame-to-frame state recurrence.
_BLOCK_FRAME: int = 256
#: Block path: samples per sub-frame (the states are filled in and the outputs computed per
#: sub-frame); a multiple of ``_OUT_COLS``.
_BLOCK_SUB: int = 32
#: Output samples per matrix product of the block path (columns of a sub-frame).
_OUT_COLS: int = 8
#: The block path fills in states and computes outputs in pieces of whole frames whose work
#: array holds at most about this many bytes (bounds its memory and cache footprint).
_WORK_BYTES: int = 1 << 20
#: Acceptance of a band for the block path: largest deviation from ``scipy.signal.sosfilt``
#: on the first-use probe, relative to the largest reference output (or state) magnitude.
_BLOCK_TOL: float = 1e-11

#: Largest matrix product, in multiply-adds, of one BLAS call (see :func:`matmul_rows`).
SINGLE_THREAD_MACS: int = 1 << 18

#: State-space system ``(A, B, C, D)``: ``s' = A s + B x``, ``y = C s + D x``.
System = tuple[np.ndarray, np.ndarray, np.ndarray, float]


def matmul_rows(a: np.ndarray, b: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """``a @ b`` for a 2-D ``a`` (m, k) and ``b`` (k, n), in products of a few rows each.

    OpenBLAS runs a product of at most 2**18 multiply-adds on the calling thread and larger
    ones on all its threads (unless ``OPENBLAS_NUM_THREADS=1``). For the narrow products of
    the block paths here the threads do not pay: with them the CPU time doubles (the extra
    thread spins between calls) and the wall time does not drop, or rises on a busy machine.
    So ``a`` is cut into stacked pieces of at most ``SINGLE_THREAD_MACS // (k n)`` rows,
    one NumPy call for all of them (NumPy calls BLAS once per piece); each output row is the
    same dot product as in one call.
    """
    m, k = a.shape
    n = b.shape[1]
    out = np.empty((m, n)) if out is None else out
    rows = max(1, SINGLE_THREAD_MACS // (k * n))
    if m <= rows:
        return np.matmul(a, b, out=out)
    whole = m // rows * rows
    np.matmul(a[:whole].reshape(-1, rows, k), b, out=out[:whole].reshape(-1, rows, n))
    if whole < m:
        np.matmul(a[whole:], b, out=out[whole:])
    return out


def _state_space(sos: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """State-space form ``s' = A s + B x``, ``y = C s + D x`` of a cascade run by sosfilt.

    The state vector is the sosfilt state ``zi`` (shape ``(sections, 2)``) with the sections
    in reverse order, ``s = zi[::-1].ravel()``: a section depends on the sections before it,
    so ``A`` is zero below its first sub-diagonal (exactly, and so is every power of it).

    Returns
    -------
    A : ndarray, shape (n, n)
    B, C : ndarray, shape (n,)
    D : float
    """
    n = 2 * sos.shape[0]
    sig = np.zeros(n + 1)  # linear form of the current signal over [s, x]
    sig[n] = 1.0
    rows = np.zeros((n, n + 1))
    for j, (b0, b1, b2, _, a1, a2) in enumerate(sos):
        i0 = n - 2 - 2 * j  # position of zi[j, 0] in s
        y = b0 * sig
        y[i0] += 1.0
        rows[i0] = b1 * sig - a1 * y
        rows[i0, i0 + 1] += 1.0
        rows[i0 + 1] = b2 * sig - a2 * y
        sig = y
    return rows[:, :n], rows[:, n], sig[:n], float(sig[n])


def _section_system(row: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """2-state realisation ``(A, B, C, D)`` of one section ``[b0, b1, b2, 1, a1, a2]``.

    A section with zeros exactly at z = 1 (``b1 = -2 b0``, ``b2 = b0``) and real poles is
    realised as two first-order high-passes, each the input minus a one-pole low-pass of it
    (module notes); any other section as sosfilt's transposed direct form II.
    """
    b0, b1, b2, _, a1, a2 = (float(v) for v in row)
    disc = a1 * a1 - 4.0 * a2
    if b0 != 0.0 and b1 == -2.0 * b0 and b2 == b0 and disc >= 0.0:
        q = -0.5 * (a1 + math.copysign(math.sqrt(disc), a1))  # the larger root, no cancellation
        p1 = q
        p2 = a2 / q if q != 0.0 else 0.0
        a = np.array([[p1, 0.0], [-(1.0 - p2), p2]])
        return a, np.array([1.0 - p1, 1.0 - p2]), np.array([-b0, -b0]), b0
    a = np.array([[-a1, 1.0], [-a2, 0.0]])
    return a, np.array([b1 - a1 * b0, b2 - a2 * b0]), np.array([1.0, 0.0]), b0


def _cascade_state_space(sos: np.ndarray) -> System:
    """State-space form of a cascade, each section realised by :func:`_section_system`.

    The sections' states are stacked in reverse order, as in :func:`_state_space`, so that
    ``A`` is zero below its first sub-diagonal (each section depends only on the sections
    before it).
    """
    n = 2 * sos.shape[0]
    sig = np.zeros(n + 1)  # linear form of the current signal over [s, x]
    sig[n] = 1.0
    rows = np.zeros((n, n + 1))
    for j, row in enumerate(sos):
        a, b, c, d = _section_system(row)
        i0 = n - 2 - 2 * j
        rows[i0 : i0 + 2] = np.outer(b, sig)
        rows[i0 : i0 + 2, i0 : i0 + 2] += a
        out = d * sig
        out[i0 : i0 + 2] += c
        sig = out
    return rows[:, :n], rows[:, n], sig[:n], float(sig[n])


def _frame_matrices(
    ss: tuple[np.ndarray, np.ndarray, np.ndarray, float], length: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Matrices of one frame of ``length`` samples of the system ``ss = (A, B, C, D)``.

    For a frame ``x`` (``length`` samples) entered with state ``s``: the state after it is
    ``M s + gamma x`` and the output is ``obs s + toeplitz x``.

    Returns
    -------
    M : ndarray, shape (n, n)
        ``A**length``.
    gamma : ndarray, shape (n, length)
        Columns ``A**(length-1-i) B``.
    obs : ndarray, shape (length, n)
        Rows ``C A**r``.
    toeplitz : ndarray, shape (length, length)
        Lower triangular, ``toeplitz[r, i] = h[r - i]`` with the impulse response ``h``.
    """
    a, b, c, d = ss
    n = a.shape[0]
    obs = np.empty((length, n))
    gamma = np.empty((n, length))
    taps = np.empty(length)
    taps[0] = d
    row, col = c.copy(), b.copy()
    for r in range(length):
        obs[r] = row
        gamma[:, length - 1 - r] = col
        if r + 1 < length:
            taps[r + 1] = row @ b
        row, col = row @ a, a @ col
    lag = np.subtract.outer(np.arange(length), np.arange(length))
    toeplitz = np.where(lag >= 0, taps[np.maximum(lag, 0)], 0.0)
    return np.linalg.matrix_power(a, length), gamma, obs, toeplitz


class _FrameLevel:
    """Frame-to-frame recurrence of a :class:`_BlockKernel` for one frame length.

    Parameters
    ----------
    step : ndarray, shape (bands, n + sub, n)
        The kernel's sub-frame step ``[s, x] @ step = next state`` (rows: ``M_sub.T`` above
        ``gamma_sub.T``).
    subs : int
        Sub-frames per frame.
    """

    def __init__(self, step: np.ndarray, subs: int) -> None:
        _, rows, n = step.shape
        m_sub = step[:, :n, :].transpose(0, 2, 1)  # (bands, n, n)
        g_sub = step[:, n:, :].transpose(0, 2, 1)  # (bands, n, sub)
        # over a frame of ``subs`` sub-frames: state input [M**(subs-1) g, ..., M g, g]
        parts = [g_sub]
        for _ in range(subs - 1):
            parts.insert(0, np.matmul(m_sub, parts[0]))
        gamma = np.concatenate(parts, axis=2)  # (bands, n, frame)
        self.frame = subs * (rows - n)
        self.gain = np.stack([np.linalg.matrix_power(m, subs) for m in m_sub])  # A**frame
        self.drive = np.ascontiguousarray(gamma.transpose(2, 0, 1).reshape(self.frame, -1))
        self.pattern = self._band_pattern()
        self._band: tuple[int, np.ndarray] | None = None

    def _band_pattern(self) -> np.ndarray:
        """One frame's columns of the band storage of ``-A**frame`` (``dtbsv``, lower)."""
        nb, n, _ = self.gain.shape
        pat = np.zeros((nb, n + 2, n))
        for c in range(n):  # row (state after the next frame)
            for cp in range(n):  # column (state after this frame)
                d = n + c - cp
                if 1 <= d <= n + 1:
                    pat[:, d, cp] = -self.gain[:, c, cp]
                elif np.any(self.gain[:, c, cp] != 0.0):  # pragma: no cover - structural
                    raise AssertionError("frame transition matrix is not upper Hessenberg")
        return pat

    def _band_matrix(self, frames: int) -> np.ndarray:
        """Band storage (Fortran order) of the stacked recurrence, cached per frame count."""
        band = self._band  # one read: kernels of one identity share this object
        if band is None or band[0] != frames:
            n = self.gain.shape[1]
            seg = np.tile(self.pattern, (1, 1, frames))  # (bands, n+2, n*frames)
            seg[:, :, -n:] = 0.0  # the last frame of a band does not feed the next band
            full = seg.transpose(1, 0, 2).reshape(n + 2, -1)
            band = self._band = (frames, np.asfortranarray(full))
        return band[1]

    def states(self, frames_x: Sequence[np.ndarray], state: np.ndarray) -> np.ndarray:
        """States after each frame of the input entered with ``state`` (bands, n).

        Parameters
        ----------
        frames_x : sequence of ndarray, shapes (frames_i, frame)
            The input's frames, in pieces (concatenated along the first axis).
        state : ndarray, shape (bands, n)
            State before the first frame.

        Returns
        -------
        ndarray, shape (bands, frames, n)
            State after each frame, tiny values flushed.
        """
        nb, n, _ = self.gain.shape
        frames = sum(part.shape[0] for part in frames_x)
        drive = np.empty((frames, nb * n))
        f0 = 0
        for part in frames_x:
            if part.shape[0]:
                matmul_rows(part, self.drive, out=drive[f0 : f0 + part.shape[0]])
            f0 += part.shape[0]
        drive = drive.reshape(frames, nb, n).transpose(1, 0, 2).copy()
        drive[:, 0, :] += np.matmul(self.gain, state[:, :, None])[:, :, 0]
        tops = blas.dtbsv(
            n + 1, self._band_matrix(frames), drive.reshape(-1), lower=1, diag=1, overwrite_x=1
        )
        return flush_tiny(tops.reshape(nb, frames, n))


def _remember(cache: dict, size: int, key: object, value: object) -> None:
    """``cache[key] = value``, forgetting the oldest entries to keep at most ``size``."""
    while len(cache) >= size:
        del cache[next(iter(cache))]
    cache[key] = value


#: Systems and matrices of the block kernels built in this process, by
#: :attr:`_BlockKernel.identity`: a new kernel of the same sections (the next recording's
#: bank and weighting filters) takes them instead of building them again (about 12 ms per
#: file with one-third octaves and A and C at 48 kHz, a quarter of a 5 s file's analysis).
#: At most ``_KERNEL_PARTS_SIZE`` kernels' worth (the oldest is forgotten first); one kernel
#: holds 0.1 to 3 MB, most of it in the band matrix of its frame recurrence.
_KERNEL_PARTS: dict[tuple, tuple] = {}
_KERNEL_PARTS_SIZE = 32


class _BlockKernel:
    """Block state-space filtering of band filters that share one input signal.

    The input is cut into frames (``_BLOCK_FRAME`` samples for long blocks, half that for
    shorter ones, see :meth:`frame_for`) and each frame into sub-frames of ``sub`` samples.
    Per block: (1) the state input of every frame, ``Gamma x_frame``, for all frames and bands
    in one matrix product; (2) the frame-to-frame recurrence ``s_{k+1} = A**frame s_k +
    Gamma x_k``, solved for all frames and bands by one banded triangular solve (BLAS
    ``dtbsv``: the recurrence is a lower-triangular band system in the stacked states);
    (3) the states at the sub-frame starts, one sub-frame step at a time but for all frames
    and bands at once; (4) the outputs of every sub-frame, ``y = obs s + toeplitz x``, as
    matrix products of ``[s, x]`` with the stacked matrices, in chunks of ``_OUT_COLS``
    columns (so that the zero upper triangle of ``toeplitz`` is mostly skipped). The frames
    are read from the input in place, in chunks of at most ``_WORK_BYTES`` of work array;
    a block that ends inside a frame has its last chunk copied and zero padded (outputs
    past the end are discarded); the state at the true end of the block is computed from
    the last sub-frame start. By default the states are those of sosfilt's layout
    (reversed section order, :func:`_state_space`), so the bank can switch between this path
    and sosfilt at any block; ``realise`` may choose another realisation of the same
    sections.

    Parameters
    ----------
    soss : sequence of ndarray
        Second-order sections of each band (same number of sections each).
    sub : int, optional
        Sub-frame length, samples (a multiple of ``_OUT_COLS`` dividing the frame lengths).
    scratch : dict, optional
        Scratch memory, shared by the kernels of one bank (they run one after another): a
        bank's block path then keeps one set of work arrays, which stays in the CPU caches.
    realise : callable, optional
        State-space realisation of a cascade, ``sos -> (A, B, C, D)`` with ``A`` zero below
        its first sub-diagonal (default :func:`_state_space`, the sosfilt state).
    """

    def __init__(
        self,
        soss: Sequence[np.ndarray],
        sub: int = _BLOCK_SUB,
        scratch: dict[str, np.ndarray] | None = None,
        realise: Callable[[np.ndarray], System] | None = None,
    ) -> None:
        if sub % _OUT_COLS or (_BLOCK_FRAME // 2) % sub:
            raise ValueError(f"bad sub-frame length {sub}")
        self.sub, self.n_bands = sub, len(soss)
        self._scratch = {} if scratch is None else scratch
        realise = _state_space if realise is None else realise
        #: What the kernel computes: its realisation, sub-frame length and sections (the key
        #: of its first-use probe's cached verdict, :func:`probe_once`).
        self.identity = (realise, sub, tuple(
            (np.shape(s), np.asarray(s, dtype=np.float64).tobytes()) for s in soss))
        self.cols = _OUT_COLS
        parts = _KERNEL_PARTS.get(self.identity)
        if parts is None:
            parts = self._build(soss, realise)
            _remember(_KERNEL_PARTS, _KERNEL_PARTS_SIZE, self.identity, parts)
        self._systems, self.step, self.out_w, self.final, self._levels = parts
        self.n_states = self._systems[0][0].shape[0]

    def _build(self, soss: Sequence[np.ndarray], realise: Callable[[np.ndarray], System]
               ) -> tuple:
        """The kernel's systems and matrices (see :data:`_KERNEL_PARTS`)."""
        self._systems = [realise(np.asarray(s, dtype=np.float64)) for s in soss]
        self.n_states = n = self._systems[0][0].shape[0]
        sub = self.sub
        part = [_frame_matrices(ss, sub) for ss in self._systems]
        # [s, x] @ step = next state; [s, x] @ out_w[c] = output columns of chunk c
        step = np.ascontiguousarray(np.stack([np.vstack([p[0].T, p[1].T]) for p in part]))
        wide = np.stack([np.vstack([p[2].T, p[3].T]) for p in part])  # (bands, n+sub, sub)
        out_w = [
            np.ascontiguousarray(wide[:, : n + c + self.cols, c : c + self.cols])
            for c in range(0, sub, self.cols)
        ]
        final = self._final_matrices([p[1] for p in part])
        for a in [step, *out_w, *final]:
            a.setflags(write=False)  # shared by the kernels of the same identity
        levels: dict[int, _FrameLevel] = {}  # frame recurrences, built on first use
        return self._systems, step, out_w, final, levels

    def _final_matrices(self, gammas: list[np.ndarray]) -> list[np.ndarray]:
        """Matrices ``W[r]`` with ``[s, x[:r]] @ W[r]`` = the state ``r`` samples into a
        sub-frame entered with state ``s``, shape (bands, n+r, n); ``W[0]`` is unused."""
        n = self.n_states
        power = np.broadcast_to(np.eye(n), (self.n_bands, n, n))
        a = np.stack([ss[0] for ss in self._systems])
        g = np.stack(gammas)  # (bands, n, sub): columns A**(sub-1-i) B
        final = [np.empty((self.n_bands, n, n))]
        for r in range(1, self.sub):
            power = np.matmul(a, power)
            tail = g[:, :, self.sub - r :]  # A**(r-1-i) B, i < r
            w = np.concatenate([power.transpose(0, 2, 1), tail.transpose(0, 2, 1)], axis=1)
            final.append(np.ascontiguousarray(w))
        return final

    def level(self, frame: int) -> _FrameLevel:
        """Frame-to-frame recurrence for frames of ``frame`` samples (built on first use)."""
        if frame not in self._levels:
            self._levels[frame] = _FrameLevel(self.step, frame // self.sub)
        return self._levels[frame]

    @staticmethod
    def frame_for(length: int) -> int:
        """Frame length used for a block of ``length`` samples: long frames for long blocks
        (a cheaper recurrence), short ones for short blocks (fewer sub-frame steps)."""
        return _BLOCK_FRAME if length >= 64 * _BLOCK_FRAME else _BLOCK_FRAME // 2

    def padded_length(self, length: int) -> int:
        """Output row length needed for a block of ``length`` samples (whole frames)."""
        frame = self.frame_for(length)
        return -(-length // frame) * frame

    def process(
        self, x: np.ndarray, state: np.ndarray, out: np.ndarray, frame: int | None = None
    ) -> None:
        """Filter one block.

        Parameters
        ----------
        x : ndarray, shape (length,)
            Input, any length >= 1, input units.
        state : ndarray, shape (bands, n)
            States at the start of the block (kernel order), replaced by those at its end.
        out : ndarray, shape (bands, >= padded length)
            Receives the outputs in ``out[:, :length]`` (the rest is scratch).
        frame : int, optional
            Frame length, samples (default :meth:`frame_for`).
        """
        n, sub = self.n_states, self.sub
        frame = self.frame_for(x.size) if frame is None else frame
        frames = -(-x.size // frame)
        per_chunk = max(1, _WORK_BYTES // (8 * self.n_bands * (frame + frame // sub * n)))
        # and products of at most SINGLE_THREAD_MACS per band (see matmul_rows)
        per_chunk = min(per_chunk, max(1, SINGLE_THREAD_MACS // (
            (frame // sub) * (n + sub) * self.cols)))
        # the frames of the last chunk, zero padded to whole frames (copied only when x ends
        # inside a frame); the frames before it are read from x in place
        last = (frames - 1) // per_chunk * per_chunk
        if x.size == frames * frame:
            tail = x[last * frame :]
        else:
            tail = self._buffer("pad", ((frames - last) * frame,))
            tail[: x.size - last * frame] = x[last * frame :]
            tail[x.size - last * frame :] = 0.0
        head = x[: last * frame].reshape(last, frame)
        tail = tail.reshape(frames - last, frame)
        tops = self.level(frame).states([head, tail], state)
        dest = out[:, : frames * frame].reshape(self.n_bands, frames, frame)
        q, r = divmod(x.size, sub)
        start = state.copy()
        state[...] = tops[:, -1]
        for f0 in range(0, frames, per_chunk):
            f1 = min(frames, f0 + per_chunk)
            piece = head[f0:f1] if f0 < last else tail
            rows = self._subframes(piece, start, tops[:, f0 : f1 - 1], dest[:, f0:f1])
            start = tops[:, f1 - 1]
            first = f0 * frame // sub
            if first <= q < first + rows.shape[1]:
                row = rows[:, q - first]
                if r == 0:
                    state[...] = row[:, :n]
                else:
                    state[...] = np.matmul(row[:, None, : n + r], self.final[r])[:, 0, :]

    def _subframes(
        self, x: np.ndarray, start: np.ndarray, tops: np.ndarray, dest: np.ndarray
    ) -> np.ndarray:
        """States and outputs of the sub-frames of whole frames ``x``.

        Parameters
        ----------
        x : ndarray, shape (frames, frame)
            Input of whole frames.
        start : ndarray, shape (bands, n)
            State at the start of the first frame.
        tops : ndarray, shape (bands, frames - 1, n)
            States at the start of the other frames.
        dest : ndarray, shape (bands, frames, frame)
            Receives the outputs.

        Returns
        -------
        ndarray, shape (bands, frames * subs, n + sub)
            Rows ``[s, x]`` of every sub-frame (scratch memory: valid until the next call).
        """
        nb, n, sub = self.n_bands, self.n_states, self.sub
        frames, frame = dest.shape[1], dest.shape[2]
        subs = frame // sub
        work = self._buffer("work", (nb, frames, subs, n + sub))
        work[:, :, :, n:] = x.reshape(frames, subs, sub)
        work[:, 0, 0, :n] = start
        work[:, 1:, 0, :n] = tops
        for i in range(subs - 1):
            np.matmul(work[:, :, i, :], self.step, out=work[:, :, i + 1, :n])
        rows = work.reshape(nb, frames * subs, n + sub)
        y = dest.reshape(nb, frames * subs, sub)
        for k, w in enumerate(self.out_w):
            c = k * self.cols
            np.matmul(rows[:, :, : w.shape[1]], w, out=y[:, :, c : c + self.cols])
        return rows

    def _buffer(self, name: str, shape: tuple[int, ...]) -> np.ndarray:
        """Scratch array of ``shape`` in the scratch memory ``name`` (shared, see ``scratch``)."""
        size = math.prod(shape)
        if self._scratch.get(name, np.empty(0)).size < size:
            self._scratch[name] = np.empty(size)
        return self._scratch[name][:size].reshape(shape)


#: Verdicts of first-use probes in this process (:func:`probe_once`), at most
#: ``_PROBE_CACHE_SIZE`` of them (the oldest is forgotten first).
_PROBE_CACHE: dict[tuple, np.ndarray] = {}
_PROBE_CACHE_SIZE = 512


def probe_once(
    probe: Callable[[_BlockKernel, Sequence[np.ndarray]], np.ndarray],
    kernel: _BlockKernel,
    soss: Sequence[np.ndarray],
) -> np.ndarray:
    """``probe(kernel, soss)``, computed once per process for the same computation.

    A probe runs a seeded signal through the kernel and through sosfilt, so its result
    depends only on what the kernel computes (:attr:`_BlockKernel.identity`) and on the
    reference sections: a new kernel of the same sections (the next recording's bank or
    weighting filters) reuses the verdict instead of probing again: 10-20 ms per analysed
    file with one-third octaves and A and C at 48 kHz (10 s and 60 s of noise, medians of 7
    interleaved runs), 2-5 % of a minute-long file's analysis. Returns a copy.
    """
    key = (probe, kernel.identity,
           tuple((np.shape(s), np.asarray(s, dtype=np.float64).tobytes()) for s in soss))
    if key not in _PROBE_CACHE:
        verdict = np.array(probe(kernel, soss), dtype=np.float64)
        _remember(_PROBE_CACHE, _PROBE_CACHE_SIZE, key, verdict)
    return _PROBE_CACHE[key].copy()


def _probe_deviation(kernel: _BlockKernel, soss: Sequence[np.ndarray]) -> np.ndarray:
    """Largest relative deviation of ``kernel`` from ``scipy.signal.sosfilt``, per band.

    A seeded noise probe is filtered from the state left by 300 samples of noise, in one
    block per frame length the kernel uses (two frames, a sub-frame and 3 samples, so that
    every part of the block path runs; the state carried from the first block to the
    second); the output deviation is taken relative to the largest reference output, the
    final-state deviation relative to the largest reference state component. Two sosfilt
    calls per band make the reference (the noise, then both blocks).
    """
    rng = np.random.default_rng(61260)
    warm = rng.standard_normal(300)
    frames = (_BLOCK_FRAME // 2, _BLOCK_FRAME)
    parts = [rng.standard_normal(2 * frame + kernel.sub + 3) for frame in frames]
    x = np.concatenate(parts)
    state = np.empty((len(soss), kernel.n_states))
    refs = []
    for j, sos in enumerate(soss):
        _, z0 = signal.sosfilt(sos, warm, zi=np.zeros((sos.shape[0], 2)))
        y_ref, z_ref = signal.sosfilt(sos, x, zi=z0)
        state[j] = z0[::-1].ravel()
        refs.append((y_ref, z_ref[::-1].ravel()))
    got = []
    for frame, part in zip(frames, parts, strict=True):
        out = np.empty((len(soss), 3 * frame))
        kernel.process(part, state, out, frame=frame)
        got.append(out[:, : part.size])
    y = np.concatenate(got, axis=1)
    dev = np.zeros(len(soss))
    for j, (y_ref, z_ref) in enumerate(refs):
        dy = np.max(np.abs(y[j] - y_ref)) / np.max(np.abs(y_ref))
        dz = np.max(np.abs(state[j] - z_ref)) / np.max(np.abs(z_ref))
        dev[j] = max(dy, dz) if np.isfinite(dy + dz) else math.inf
    return dev


def _probe_cascades(kernel: _BlockKernel, soss: Sequence[np.ndarray]) -> np.ndarray:
    """Largest relative deviation of ``kernel`` from ``scipy.signal.sosfilt``, per cascade.

    For each frame length the kernel uses, a seeded noise probe is filtered from the zero
    state in three blocks (300 samples; two frames, a sub-frame and 3 samples; 17 samples),
    so that every part of the block path runs and the state is carried twice; each
    cascade's deviation is taken relative to its largest reference output. The kernel may
    use any realisation, and may run ``soss[j]`` with identity sections appended
    (:func:`_pad_sections`): only outputs are compared, with those of ``soss[j]`` itself.
    """
    rng = np.random.default_rng(61672)
    dev = np.zeros(len(soss))
    for frame in (_BLOCK_FRAME // 2, _BLOCK_FRAME):
        parts = [rng.standard_normal(k) for k in (300, 2 * frame + kernel.sub + 3, 17)]
        x = np.concatenate(parts)
        state = np.zeros((len(soss), kernel.n_states))
        got = []
        for part in parts:
            out = np.empty((len(soss), 3 * frame))
            kernel.process(part, state, out, frame=frame)
            got.append(out[:, : part.size])
        y = np.concatenate(got, axis=1)
        for j, sos in enumerate(soss):
            ref = signal.sosfilt(sos, x)
            d = np.max(np.abs(y[j] - ref)) / np.max(np.abs(ref))
            dev[j] = max(dev[j], float(d)) if np.isfinite(d) else math.inf
    return dev


def _pad_sections(sos: np.ndarray, sections: int) -> np.ndarray:
    """``sos`` with identity sections ``[1, 0, 0, 1, 0, 0]`` appended up to ``sections`` rows.

    An identity section passes its input unchanged and its states stay exactly zero, in
    sosfilt and in the block kernel alike (its state input and coupling are exact zeros),
    so a padded cascade has the output of the original one; it lets cascades of different
    lengths share one kernel.
    """
    extra = sections - sos.shape[0]
    return np.vstack([sos, np.tile([1.0, 0.0, 0.0, 1.0, 0.0, 0.0], (extra, 1))])


def _check_sos(sos: np.ndarray) -> np.ndarray:
    arr = np.array(sos, dtype=np.float64, order="C")
    if arr.ndim != 2 or arr.shape[1] != 6 or arr.shape[0] < 1:
        raise SettingsError(f"sos must have shape (sections, 6), got {arr.shape!r}")
    return arr


class MultiSosFilter:
    """Streaming filters of several cascades of second-order sections on one input signal.

    The cascades run together on one block kernel, as the bands of the filter bank do:
    the products then cover all of them, which is cheaper than a kernel per cascade
    (module notes). Cascades with fewer sections than the longest are padded with
    identity sections (:func:`_pad_sections`), which does not change their output.

    Parameters
    ----------
    soss : sequence of array_like, each of shape (sections, 6)
        Rows ``[b0, b1, b2, 1, a1, a2]`` of each cascade, as for
        :func:`scipy.signal.sosfilt`.

    Attributes
    ----------
    soss : list of numpy.ndarray
        The sections of each cascade (copies, not padded).
    block_path : list of bool or None
        Per cascade: True when the block kernel passed its first-use probe and filters
        every block, False when ``scipy.signal.sosfilt`` or the compiled kernel does; None
        before the first sample.
    compiled_path : bool or None
        True when the compiled kernel (``sos_bands``, :mod:`bandmeter.compiled`) filters
        every cascade, in sosfilt's arithmetic (the same bits); chosen on the first sample
        where the extension is built, and kept; None before the first sample.

    Notes
    -----
    The filters start at rest; their states carry across :meth:`process` calls, so any
    split of a signal into blocks gives the outputs of one pass (to rounding). On the first
    non-empty block the kernel, with the realisation of :func:`_cascade_state_space`, is
    checked on a probe against ``scipy.signal.sosfilt`` (:func:`_probe_cascades`); a
    cascade beyond ``_BLOCK_TOL`` is filtered by sosfilt for good, the others stay on a
    kernel of their own. States below 1e-200 are flushed after each block (no slow
    subnormal arithmetic in silence).

    Examples
    --------
    >>> from scipy import signal
    >>> low = signal.butter(4, 0.1, output="sos")
    >>> high = signal.butter(3, 0.2, btype="high", output="sos")
    >>> x = np.random.default_rng(0).standard_normal(10000)
    >>> f = MultiSosFilter([low, high])
    >>> first = f.process(x[:3000])
    >>> y_low, y_high = (np.concatenate(p) for p in zip(first, f.process(x[3000:])))
    >>> bool(np.allclose(y_high, signal.sosfilt(high, x), rtol=0, atol=1e-12))
    True
    """

    def __init__(self, soss: Sequence[np.ndarray]) -> None:
        if len(soss) < 1:
            raise SettingsError("at least one cascade of sections is needed, got none")
        self.soss = [_check_sos(sos) for sos in soss]
        self.block_path: list[bool] | None = None
        self.compiled_path: bool | None = None
        self._compiled: ModuleType | None = None
        self._kernel: _BlockKernel | None = None
        self._members: list[int] = []  # cascades on the kernel, in kernel order
        sections = max(sos.shape[0] for sos in self.soss)
        self._padded = np.stack([_pad_sections(sos, sections) for sos in self.soss])
        self.reset()

    def reset(self) -> None:
        """Return every filter to rest (zero state)."""
        n = 2 * max(sos.shape[0] for sos in self.soss)
        self._state = np.zeros((len(self._members), n))  # block kernel, its realisation
        # sosfilt's layout, every cascade padded to the longest (the compiled kernel's);
        # self._zi[j] is the view of cascade j's own sections
        self._zi_padded = np.zeros((len(self.soss), n // 2, 2))
        self._zi = [self._zi_padded[j, : sos.shape[0]] for j, sos in enumerate(self.soss)]

    def _choose_path(self) -> None:
        compiled = kernels()
        if compiled is not None and np.all(self._padded[:, :, 3] == 1.0):
            # every cascade in sosfilt's arithmetic (its bits), side by side in vector lanes
            # (bandmeter/_kernels.c); kept for the life of the filter, whose state it holds
            self._compiled, self.compiled_path = compiled, True
            self.block_path = [False] * len(self.soss)
            return
        self.compiled_path = False
        sections = self._padded.shape[1]
        padded = list(self._padded)
        kernel = _BlockKernel(padded, realise=_cascade_state_space)
        dev = probe_once(_probe_cascades, kernel, self.soss)
        self.block_path = [bool(d <= _BLOCK_TOL) for d in dev]
        self._members = [j for j, ok in enumerate(self.block_path) if ok]
        if 0 < len(self._members) < len(self.soss):
            kernel = _BlockKernel([padded[j] for j in self._members],
                                  realise=_cascade_state_space)
        self._kernel = kernel if self._members else None
        self._state = np.zeros((len(self._members), 2 * sections))

    def process(self, x: np.ndarray) -> list[np.ndarray]:
        """Filter the next block by every cascade.

        Parameters
        ----------
        x : numpy.ndarray
            1-D float64 block following the previous one (any length).

        Returns
        -------
        list of numpy.ndarray
            Output of each cascade, new float64 arrays of the length of ``x`` (each may be
            a view of a slightly longer new array).
        """
        n = x.size
        if n == 0:
            return [np.zeros(0) for _ in self.soss]
        if self.block_path is None:
            self._choose_path()
        if self._compiled is not None:
            out = np.empty((len(self.soss), n))
            self._compiled.sos_bands(np.ascontiguousarray(x, dtype=np.float64), self._padded,
                                     self._zi_padded, self._padded.shape[1], out, n)
            return list(out)  # states below 1e-200 flushed by the kernel
        outs: list[np.ndarray] = [np.empty(0)] * len(self.soss)
        if self._kernel is not None:
            out = np.empty((len(self._members), self._kernel.padded_length(n)))
            self._kernel.process(x, self._state, out)
            flush_tiny(self._state)
            for row, j in zip(out, self._members, strict=True):
                outs[j] = row[:n]
        for j, ok in enumerate(self.block_path):
            if not ok:
                outs[j], zi = signal.sosfilt(self.soss[j], x, zi=self._zi[j])
                self._zi[j][...] = flush_tiny(zi)
        return outs


class SosFilter:
    """Streaming filter of one cascade of second-order sections, on the block kernel.

    Parameters
    ----------
    sos : array_like, shape (sections, 6)
        Rows ``[b0, b1, b2, 1, a1, a2]`` as for :func:`scipy.signal.sosfilt`.

    Attributes
    ----------
    sos : numpy.ndarray
        The sections (a copy).
    block_path : bool or None
        True when the block kernel passed its first-use probe and filters every block,
        False when ``scipy.signal.sosfilt`` does; None before the first sample.

    Notes
    -----
    :class:`MultiSosFilter` with one cascade. The filter starts at rest; its state carries
    across :meth:`process` calls, so any split of a signal into blocks gives the output of
    one pass (to rounding: the block kernel regroups the arithmetic by frames of the
    block). On the first non-empty block the kernel, with the realisation of
    :func:`_cascade_state_space`, is checked on a probe against ``scipy.signal.sosfilt``
    (:func:`_probe_cascades`); beyond ``_BLOCK_TOL`` the filter uses sosfilt for good.
    Blocks of any length take the chosen path: the kernel costs about as much as sosfilt's
    argument checks on a block of a few samples. States below 1e-200 are flushed after
    each block (no slow subnormal arithmetic in silence).

    Examples
    --------
    >>> from scipy import signal
    >>> sos = signal.butter(4, 0.1, output="sos")
    >>> x = np.random.default_rng(0).standard_normal(10000)
    >>> f = SosFilter(sos)
    >>> y = np.concatenate([f.process(x[:3000]), f.process(x[3000:])])
    >>> bool(np.allclose(y, signal.sosfilt(sos, x), rtol=0, atol=1e-12))
    True
    """

    def __init__(self, sos: np.ndarray) -> None:
        self._multi = MultiSosFilter([sos])
        self.sos = self._multi.soss[0]

    @property
    def block_path(self) -> bool | None:
        paths = self._multi.block_path
        return None if paths is None else paths[0]

    def reset(self) -> None:
        """Return the filter to rest (zero state)."""
        self._multi.reset()

    def process(self, x: np.ndarray) -> np.ndarray:
        """Filter the next block.

        Parameters
        ----------
        x : numpy.ndarray
            1-D float64 block following the previous one (any length).

        Returns
        -------
        numpy.ndarray
            Output, a new float64 array of the same length (may be a view of a slightly
            longer new array).
        """
        return self._multi.process(x)[0]
