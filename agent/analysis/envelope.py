"""Envelope (demodulation) analysis for rolling bearings, done in the frequency domain.

Procedure (Randall & Antoni, "Rolling element bearing diagnostics - a tutorial", MSSP 25(2) 2011, from
memory; Randall, "Modern envelope analysis for bearing diagnostics", COMADEM 2015):

1. One FFT of the block (mean removed, 2 % cosine taper at each end so the wrap-around of the record is
   not read as an impact; the tapered ends are dropped from everything computed afterwards).
2. Band-pass around a structural resonance the impacts excite: ``band_hz`` from the configuration, or the
   band found by the search below.
3. Analytic signal of the band by inverse FFT of the band's one-sided bins only, shifted to 0 Hz: this is
   the ideal band-pass filter plus Hilbert transform, and it lands directly at a reduced rate
   fs_c = (band bins + span bins) x df, chosen so that the squared envelope does not alias into
   0 .. ``fmax_hz`` (the squared envelope of a band B wide spans +/- B, so fs_c > B + fmax_hz). The band's
   bins get a short raised-cosine taper at each edge to keep the ideal filter's ringing low.
4. Envelope |z| and squared envelope |z|^2 (the squared envelope is the better detector: no square-root
   distortion, Randall 2015), each with its mean removed, Welch-averaged (Hann) at the plan's envelope
   resolution ``fmax_hz / lines`` (or a little finer, when that makes the segment an FFT-friendly length).

The envelope spectrum (m/s^2 RMS per line of |z|) is what bands and evidence read; the squared-envelope
spectrum (SES) is what the bearing findings read.

Welch segments: the plan caps the envelope lines so that two half-overlapping segments fit the block's
untapered part; every band gets both (a segment may be up to 1 % shorter than the plan's resolution asks,
see ``EnvelopeKernel._segment_length``), so that the band values of any band average alike.

Band search (a kurtogram-like grid, after Antoni's fast kurtogram, MSSP 21 (2007) 108-124): candidate
bands lie side by side, of widths (2/3)^j times half the Nyquist frequency down to the narrowest width
that still holds the envelope span, all between ``auto_min_hz`` and ``auto_max_hz`` (0.45 x the sample
rate unless configured: below the converter's anti-alias roll-off; successive widths put the band edges in
different places, so a resonance cut by an edge at one width is whole at another); each width is one
batched inverse FFT of critically-sampled band signals c(t). Two measures are computed for every candidate:

- spectral kurtosis SK = <|c|^4> / <|c|^2>^2 - 2 (Antoni, "The spectral kurtosis: a useful tool for
  characterising non-stationary signals", MSSP 20 (2006) 282-307): 0 for stationary Gaussian noise, -1
  for a steady tone, large for transients;
- cyclic content: the negentropy <(S/<S>) ln(S/<S>)> of the band's squared-envelope spectrum S over
  0.3x .. ``fmax_hz``, leaving out the lines on integer shaft orders (the spectral half of Antoni's
  infogram, MSSP 74 (2016) 73-94, from memory). It is large when the envelope holds a few strong
  *periodic* lines, i.e. repetitive impacts, and it ignores the beating of shaft-order tones.

A band searched anew on every update moves from update to update on a healthy machine (nothing
impulsive to find), and its values cannot be trended; so the daemon and replay search once per point,
when its baseline learning starts, keep the band with the baselines and pass it back
(:meth:`EnvelopeKernel.analyze` with ``kept_hz``); :meth:`EnvelopeKernel.review_band` runs the search on
a later block and says whether it would choose a clearly better band (elsewhere, and scoring at least
max(50 % of the kept band's score, 0.5) more). :meth:`EnvelopeKernel.choose_band` stays callable alone.

``criterion="kurtosis"`` picks the band of highest SK. The default, ``"cyclic"``, picks the band of
highest cyclic content: on the shared bearing recordings SK alone chose bands dominated by bursts that are
not periodic (10-12 kHz in the 48 kHz records), where the inner-race line read only 6 x its floor, against
more than 100 x in the band the cyclic measure chose. The chosen band's SK is reported either way.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from .lazy import scipy
from .ordertrack import ShaftAngle, resample
from .plan import EDGE_TAPER_FRACTION, EnvelopePlan
from .result import BandReview
from .spectrum import WelchKernel, hann

BAND_EDGE_TAPER_FRACTION = 0.05  # of the band's bins, raised-cosine at each band edge
WIDTH_STEP = 2.0 / 3.0  # ratio of successive candidate band widths in the search
SEARCH_STEP = 1.0  # candidate band starts, in band widths (1: adjacent bands; 0.5: half-overlapping)
CYCLIC_OVERSAMPLING = 4.0  # the search's squared envelopes are averaged down to 4 x the envelope span
SHAFT_ORDER_GUARD_LINES = 2  # lines this close to an integer shaft order are left out of the cyclic measure
CRITERIA = ("cyclic", "kurtosis")
# The envelope spectrum's segments may be this much shorter than the plan's resolution asks (a coarser
# line spacing by at most 1 %) so that the segments the plan counted on all fit (see _segment_length).
SEGMENT_SLACK = 0.01
# A later search's band is "clearly better" than the kept one when it lies elsewhere (overlaps less than
# half of the narrower band) and scores at least max(50 % of |kept score|, 0.5) more (our choice: on
# healthy signals the best of the grid beats a kept noise band by about 0.05 in either criterion).
CLEARLY_BETTER_FRACTION = 0.5
CLEARLY_BETTER_MIN = 0.5


@dataclass(frozen=True)
class BlockSpectrum:
    """The rfft of one tapered block, shared by the speed estimate, the band search and demodulation."""

    spec: np.ndarray
    n_samples: int
    n_fft: int
    n_trim: int  # tapered samples at each end
    df_hz: float

    def amplitude(self, n_bins: int) -> np.ndarray:
        """|X| of the first ``n_bins`` bins as if Hann-windowed (relative scale: for tone searches)."""
        from .speed import hann_smooth  # noqa: PLC0415

        return hann_smooth(self.spec[: n_bins + 1].astype(complex))[:n_bins]


@dataclass(frozen=True)
class BandChoice:
    band_hz: tuple[float, float]
    kurtosis: float  # spectral kurtosis of the band
    score: float  # the criterion's value (cyclic content or SK)


@dataclass(frozen=True)
class EnvelopeOutput:
    band_hz: tuple[float, float]
    kurtosis: float  # spectral kurtosis of the demodulation band (nan for a fixed band)
    freqs_hz: np.ndarray  # 0 .. fmax_hz
    df_hz: float
    envelope_psd: np.ndarray  # PSD of |z|, (m/s^2)^2/Hz
    envelope_rms: np.ndarray  # RMS per line of |z|, m/s^2
    squared_rms: np.ndarray  # RMS per line of |z|^2, (m/s^2)^2 (the SES)


def _raised_cosine(n: int, n_ramp: int) -> np.ndarray:
    w = np.ones(n)
    if n_ramp > 0:
        ramp = 0.5 - 0.5 * np.cos(np.pi * (np.arange(n_ramp) + 0.5) / n_ramp)
        w[:n_ramp] = ramp
        w[n - n_ramp:] = ramp[::-1]
    return w


def spectral_kurtosis(c: np.ndarray, axis: int = -1) -> np.ndarray:
    """SK of complex band signals: <|c|^4>/<|c|^2>^2 - 2 (0 for circular Gaussian noise)."""
    p = c.real**2
    p += c.imag**2
    return _sk_of_power(p, axis)


def _sk_of_power(p: np.ndarray, axis: int = -1) -> np.ndarray:
    m2 = p.mean(axis=axis)
    m4 = np.einsum("...i,...i->...", p, p) / p.shape[axis]
    with np.errstate(invalid="ignore", divide="ignore"):
        sk = m4 / (m2 * m2) - 2.0
    return np.where(m2 > 0, sk, -np.inf)


def _strided_sum(p: np.ndarray, q: int, n_q: int) -> np.ndarray:
    """Sums of ``q`` consecutive samples along the last axis, ``n_q`` of them (a fresh array): q strided
    additions, several times faster than ``reshape(..., n_q, q).sum(-1)`` for small ``q``."""
    out = p[..., 0: n_q * q: q].copy()
    for j in range(1, q):
        out += p[..., j: n_q * q: q]
    return out


def negentropy(s: np.ndarray, axis: int = -1) -> np.ndarray:
    """<(s/<s>) ln(s/<s>)>: 0 for a flat spectrum, large when a few lines hold the power."""
    mean = s.mean(axis=axis, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        r = s / mean
        v = r * np.log(np.where(r > 0, r, 1.0))
    out = v.mean(axis=axis)
    return np.where(np.squeeze(mean, axis=axis) > 0, out, -np.inf)


class EnvelopeKernel:
    """Envelope spectra of blocks at one sampling rate; caches its set-ups per block length and band."""

    def __init__(self, plan: EnvelopePlan, fs_hz: float):
        self.plan = plan
        self.fs_hz = float(fs_hz)
        self._block_cache: dict[int, tuple[int, int, np.ndarray]] = {}
        self._welch_cache: dict[tuple[int, float], WelchKernel] = {}
        self._taper_cache: dict[int, np.ndarray] = {}

    # ------------------------------------------------------------------------------------ set-ups
    def _block_setup(self, n: int) -> tuple[int, int, np.ndarray]:
        setup = self._block_cache.get(n)
        if setup is None:
            n_fft = scipy.fft.next_fast_len(n, real=True)
            n_trim = max(int(n * EDGE_TAPER_FRACTION), 1)
            ramp = 0.5 - 0.5 * np.cos(np.pi * (np.arange(n_trim) + 0.5) / n_trim)
            setup = (n_fft, n_trim, ramp)
            if len(self._block_cache) > 8:
                self._block_cache.clear()
            self._block_cache[n] = setup
        return setup

    def _band_taper(self, n_bins: int) -> np.ndarray:
        w = self._taper_cache.get(n_bins)
        if w is None:
            w = _raised_cosine(n_bins, int(n_bins * BAND_EDGE_TAPER_FRACTION))
            if len(self._taper_cache) > 64:
                self._taper_cache.clear()
            self._taper_cache[n_bins] = w
        return w

    def _welch(self, n_per_seg: int, fs_c: float) -> WelchKernel:
        key = (n_per_seg, fs_c)
        k = self._welch_cache.get(key)
        if k is None:
            n_overlap = min(int(round(n_per_seg * self.plan.overlap_frac)), n_per_seg - 1)
            k = WelchKernel(hann(n_per_seg), n_overlap, fs_c, dtype=np.float32)
            if len(self._welch_cache) > 32:
                self._welch_cache.clear()
            self._welch_cache[key] = k
        return k

    # ------------------------------------------------------------------------------------- steps
    def block_spectrum(self, x0: np.ndarray) -> BlockSpectrum:
        """rfft of the block (mean removed) with its ends tapered."""
        n = x0.size
        n_fft, n_trim, ramp = self._block_setup(n)
        xt = np.array(x0, dtype=np.float32)  # a copy, in single precision (see spectrum.py)
        xt[:n_trim] *= ramp
        xt[n - n_trim:] *= ramp[::-1]
        return BlockSpectrum(scipy.fft.rfft(xt, n_fft), n, n_fft, n_trim, self.fs_hz / n_fft)

    def _cyclic(self, p: np.ndarray, rate_hz: float, shaft_hz: float) -> np.ndarray:
        """Cyclic content of each row of squared envelopes ``p`` sampled at ``rate_hz``."""
        plan = self.plan
        q = max(int(rate_hz / (CYCLIC_OVERSAMPLING * plan.fmax_hz)), 1)
        n_q = scipy.fft.prev_fast_len(p.shape[-1] // q, real=True)  # awkward lengths cost several times more
        pd = _strided_sum(p, q, n_q)  # q x the mean of each q samples: the measure does not depend on scale
        pd -= pd.mean(axis=-1, keepdims=True)
        spec = scipy.fft.rfft(pd, axis=-1, overwrite_x=True)
        power = np.square(spec.real)
        power += np.square(spec.imag)
        t_s = n_q * q / rate_hz
        group = max(int(round(plan.df_hz * t_s)), 1)
        n_lines = min(int(plan.fmax_hz * t_s), power.shape[-1] - 1) // group
        lines = _strided_sum(power[:, 1:], group, n_lines)
        keep = self._cyclic_keep(n_lines, group, t_s, shaft_hz)
        return negentropy(lines[:, keep])

    @staticmethod
    def _cyclic_keep(n_lines: int, group: int, t_s: float, shaft_hz: float) -> np.ndarray:
        """The lines the cyclic measure reads: from 0.3 x shaft speed, away from integer shaft orders."""
        line_hz = (1.0 + group * (np.arange(n_lines) + 0.5) - 0.5) / t_s
        keep = line_hz >= 0.3 * shaft_hz
        if shaft_hz > 0:
            off = np.abs(line_hz - shaft_hz * np.round(line_hz / shaft_hz))
            keep &= off > SHAFT_ORDER_GUARD_LINES * group / t_s
        if np.count_nonzero(keep) < 8:
            keep[:] = True
        return keep

    def _scores(self, bs: BlockSpectrum, starts: np.ndarray, k_w: int, shaft_hz: float,
                criterion: str) -> tuple[np.ndarray, np.ndarray]:
        """The criterion's score of the bands of ``k_w`` bins starting at bins ``starts`` (and their
        squared envelopes at the critical rate)."""
        bands = self._gather(bs.spec, starts, k_w)
        c = scipy.fft.ifft(bands, axis=-1, overwrite_x=True)
        n_valid = int(k_w * bs.n_samples / bs.n_fft)
        cut = int(math.ceil(bs.n_trim * k_w / bs.n_fft))
        c = c[:, cut: n_valid - cut]
        p = np.square(c.real)
        p += np.square(c.imag)
        if criterion == "cyclic":
            return self._cyclic(p, k_w * bs.df_hz, shaft_hz), p
        return _sk_of_power(p), p

    def _gather(self, spec: np.ndarray, starts: np.ndarray, k_w: int) -> np.ndarray:
        """The bins of bands of ``k_w`` bins from ``starts`` (a fresh array), each with the band taper:
        side-by-side bands are one contiguous copy, and only the tapered edges are multiplied."""
        n_b = starts.size
        if n_b > 1 and np.all(np.diff(starts) == k_w):
            bands = spec[starts[0]: starts[0] + n_b * k_w].reshape(n_b, k_w).copy()
        else:
            bands = spec[starts[:, None] + np.arange(k_w)[None, :]]
        ramp = self._edge_ramp(k_w)
        if ramp.size:
            bands[:, : ramp.size] *= ramp
            bands[:, k_w - ramp.size:] *= ramp[::-1]
        return bands

    def _edge_ramp(self, n_bins: int) -> np.ndarray:
        """The rising edge of :meth:`_band_taper` in single precision (its middle is all ones)."""
        key = -n_bins
        w = self._taper_cache.get(key)
        if w is None:
            w = _raised_cosine(n_bins, int(n_bins * BAND_EDGE_TAPER_FRACTION))
            w = w[: int(n_bins * BAND_EDGE_TAPER_FRACTION)].astype(np.float32)
            if len(self._taper_cache) > 64:
                self._taper_cache.clear()
            self._taper_cache[key] = w
        return w

    def band_score(self, bs: BlockSpectrum, band_hz: tuple[float, float], shaft_hz: float,
                   criterion: str = "cyclic") -> float:
        """The search criterion's score of one given band (as the search would score it)."""
        if criterion not in CRITERIA:
            raise ValueError(f"criterion {criterion!r}: choose one of {', '.join(CRITERIA)}")
        df = bs.df_hz
        k_lo = max(int(round(band_hz[0] / df)), 1)
        k_w = min(int(round(band_hz[1] / df)) + 1, bs.spec.size) - k_lo  # the lines lo..hi, both included
        if k_w < 8:
            raise InputError(f"envelope band {band_hz[0]:g}..{band_hz[1]:g} Hz holds fewer than 8 lines "
                             "at this block length")
        score, _ = self._scores(bs, np.array([k_lo]), k_w, shaft_hz, criterion)
        return float(score[0])

    def review_band(self, bs: BlockSpectrum, kept_hz: tuple[float, float], shaft_hz: float,
                    criterion: str = "cyclic") -> BandReview:
        """Search the bands and compare the best with the kept band ``kept_hz`` on this block."""
        best = self.choose_band(bs, shaft_hz, criterion)
        kept_score = self.band_score(bs, kept_hz, shaft_hz, criterion)
        lo, hi = max(best.band_hz[0], kept_hz[0]), min(best.band_hz[1], kept_hz[1])
        narrower = min(best.band_hz[1] - best.band_hz[0], kept_hz[1] - kept_hz[0])
        elsewhere = max(hi - lo, 0.0) < 0.5 * narrower
        margin = max(CLEARLY_BETTER_FRACTION * abs(kept_score), CLEARLY_BETTER_MIN)
        return BandReview(
            kept_hz=(float(kept_hz[0]), float(kept_hz[1])),
            kept_score=kept_score,
            best_hz=best.band_hz,
            best_score=best.score,
            criterion=criterion,
            clearly_better=bool(elsewhere and best.score >= kept_score + margin),
        )

    def choose_band(self, bs: BlockSpectrum, shaft_hz: float, criterion: str = "cyclic") -> BandChoice:
        """Search the candidate bands (see the module docstring) and return the best by ``criterion``."""
        if criterion not in CRITERIA:
            raise ValueError(f"criterion {criterion!r}: choose one of {', '.join(CRITERIA)}")
        plan, df = self.plan, bs.df_hz
        k_min = int(math.ceil(plan.auto_min_hz / df))
        k_max = min(int(plan.auto_max_hz / df), bs.spec.size - 1)
        best: tuple[float, int, int] | None = None  # (score, k_lo, k_w)
        width = min(0.25 * self.fs_hz, (k_max - k_min) * df)
        while width >= plan.min_bandwidth_hz * (1 - 1e-9):
            k_w = scipy.fft.prev_fast_len(max(int(width / df), 8))
            starts = np.arange(k_min, k_max - k_w + 1, max(int(k_w * SEARCH_STEP), 1))
            width *= WIDTH_STEP
            if not starts.size:
                continue
            score, _ = self._scores(bs, starts, k_w, shaft_hz, criterion)
            i = int(np.argmax(score))
            if best is None or score[i] > best[0]:
                best = (float(score[i]), int(starts[i]), k_w)
        if best is None:
            raise InputError(
                f"no envelope band of at least {plan.min_bandwidth_hz:g} Hz fits between auto_min_hz = "
                f"{plan.auto_min_hz:g} Hz and {plan.auto_max_hz:g} Hz"
            )
        best_score, k_lo, k_w = best
        sk = self._band_kurtosis(bs, k_lo, k_w)
        return BandChoice((k_lo * df, (k_lo + k_w - 1) * df), sk, best_score)  # its first and last line

    def _band_kurtosis(self, bs: BlockSpectrum, k_lo: int, k_w: int) -> float:
        """SK of one band's critically sampled signal, its taper applied in double precision: the figure
        reported for the chosen band, whichever criterion chose it (the search works in single precision,
        and a batch's sums differ from one row's in the last digits)."""
        band = (bs.spec[k_lo: k_lo + k_w] * self._band_taper(k_w)).astype(bs.spec.dtype)
        c = scipy.fft.ifft(band, overwrite_x=True)
        n_valid = int(k_w * bs.n_samples / bs.n_fft)
        cut = int(math.ceil(bs.n_trim * k_w / bs.n_fft))
        return float(spectral_kurtosis(c[cut: n_valid - cut]))

    def band_signal(self, bs: BlockSpectrum, band_hz: tuple[float, float]) -> tuple[np.ndarray, float, tuple[float, float]]:
        """Analytic signal of the band, shifted down by its low edge, at the reduced rate: (z, fs_c, band).

        The band holds the lines from ``band_hz[0]`` to ``band_hz[1]``, both included (rounded inwards to
        whole lines); the band returned is the frequency of its first and of its last line, so passing it
        back selects the same lines.

        |z| is the envelope in m/s^2. The tapered ends of the block are already cut off; z[0] is the
        sample at time ``n_trim / fs`` of the block.
        """
        plan, df = self.plan, bs.df_hz
        k_lo = max(int(math.ceil(band_hz[0] / df)), 1)
        k_hi = min(int(math.floor(band_hz[1] / df)) + 1, bs.spec.size)
        k_w = k_hi - k_lo
        if k_w < 4:
            raise InputError(f"envelope band {band_hz[0]:g}..{band_hz[1]:g} Hz holds fewer than 4 lines at this block length")
        m = scipy.fft.next_fast_len(k_w + int(math.ceil(plan.fmax_hz / df)) + 2)
        shifted = np.zeros(m, dtype=bs.spec.dtype)
        shifted[:k_w] = bs.spec[k_lo:k_hi] * self._band_taper(k_w)
        z = scipy.fft.ifft(shifted, overwrite_x=True)
        z *= 2.0 / bs.n_fft * m  # ifft's 1/m, the one-sided doubling and the rfft's n_fft
        n_valid = int(bs.n_samples * m / bs.n_fft)
        cut = int(math.ceil(bs.n_trim * m / bs.n_fft))
        return z[cut: n_valid - cut], m * df, (float(k_lo * df), float((k_hi - 1) * df))  # first and last line

    def _segment_length(self, fs_c: float, n_z: int) -> int:
        """Welch segment length for the envelope spectrum of ``n_z`` samples at ``fs_c``: the plan's
        resolution (``fs_c / df_hz`` samples), a little finer when that is an FFT-friendly length, or a
        little coarser (at most ``SEGMENT_SLACK``), but never so long that fewer segments fit than the plan's
        resolution gives. The plan caps its lines so that two half-overlapping segments fit the untapered
        block; a band's reduced rate rounds its samples, and a segment a few samples too long, or lengthened
        to an FFT-friendly size, then left one segment where there were two: half the averaging, and band
        values spread about 1.4 x wider from update to update (a fixed 2-7 kHz band happened to fit
        exactly; most searched bands did not)."""
        overlap = self.plan.overlap_frac

        def fits(n: int) -> int:
            hop = n - min(int(round(n * overlap)), n - 1)
            return 0 if n > n_z else 1 + (n_z - n) // hop

        n0 = int(math.ceil(fs_c / self.plan.df_hz - 1e-9))
        n_min = int(n0 * (1.0 - SEGMENT_SLACK))
        if fits(n_min) == 0:
            return n0  # too short for one segment: demodulate says so
        target = fits(n_min)
        finer = scipy.fft.next_fast_len(n0, real=True)
        if fits(finer) >= target:
            return finer  # a little finer, much faster
        n = n0
        while fits(n) < target:  # at most SEGMENT_SLACK x n0 steps
            n -= 1
        coarser = scipy.fft.prev_fast_len(n, real=True)
        return coarser if coarser >= n_min else n

    def demodulate(self, bs: BlockSpectrum, band_hz: tuple[float, float], kurtosis: float = float("nan"),
                   angle: ShaftAngle | None = None, shaft_hz: float = 0.0) -> EnvelopeOutput:
        """Envelope and squared-envelope spectra of the block in ``band_hz``; with ``angle`` the envelopes
        are resampled to equal steps of shaft angle at the mean ``shaft_hz`` first (order tracking,
        :mod:`.ordertrack`)."""
        plan, n = self.plan, bs.n_samples
        z, fs_c, band = self.band_signal(bs, band_hz)
        both = np.empty((2, z.size), dtype=np.float32)  # single precision, like the other transforms
        sq = both[1]
        np.multiply(z.real, z.real, out=sq)
        sq += np.square(z.imag)
        np.sqrt(sq, out=both[0])
        if angle is not None:
            m = int(round(fs_c / bs.df_hz))
            t0_s = math.ceil(bs.n_trim * m / bs.n_fft) / fs_c  # z[0]'s time in the block (band_signal's cut)
            both = np.stack([resample(row, fs_c, angle, t0_s, shaft_hz) for row in both])
        n_per_seg = self._segment_length(fs_c, z.size)
        if n_per_seg > z.size:
            raise InputError(
                f"block of {n / self.fs_hz:.3g} s is too short for the envelope spectrum: {plan.lines} lines over "
                f"{plan.fmax_hz:g} Hz need {1.0 / plan.df_hz:.3g} s after the {EDGE_TAPER_FRACTION:.0%} tapered ends "
                f"(usable {z.size / fs_c:.3g} s)"
            )
        welch = self._welch(n_per_seg, fs_c)
        psd = welch.psd(both)
        n_keep = int(np.searchsorted(welch.freqs_hz, plan.fmax_hz, side="right"))
        rms = welch.line_rms(psd[:, :n_keep])
        return EnvelopeOutput(
            band_hz=band,
            kurtosis=kurtosis,
            freqs_hz=welch.freqs_hz[:n_keep],
            df_hz=welch.df_hz,
            envelope_psd=psd[0, :n_keep],
            envelope_rms=rms[0],
            squared_rms=rms[1],
        )

    def analyze(self, x0: np.ndarray, shaft_hz: float, bs: BlockSpectrum | None = None,
                criterion: str = "cyclic", kept_hz: tuple[float, float] | None = None,
                review: bool = False, angle: ShaftAngle | None = None) -> tuple[EnvelopeOutput, str, BandReview | None]:
        """Envelope spectra of a block with its mean removed (m/s^2) and where the band came from:
        ``fixed`` (the plan's band), ``kept`` (a band chosen earlier and kept: ``kept_hz``; with
        ``review`` the search runs too and its best band is compared with it) or ``searched`` (this
        block's search). With ``angle`` (the shaft angle over the block, mean speed ``shaft_hz``) the
        envelopes are order-tracked."""
        bs = bs if bs is not None else self.block_spectrum(x0)
        if self.plan.band_hz is not None:
            return self.demodulate(bs, self.plan.band_hz, angle=angle, shaft_hz=shaft_hz), "fixed", None
        if kept_hz is not None:
            verdict = self.review_band(bs, kept_hz, shaft_hz, criterion) if review else None
            return self.demodulate(bs, kept_hz, angle=angle, shaft_hz=shaft_hz), "kept", verdict
        choice = self.choose_band(bs, shaft_hz, criterion)
        return self.demodulate(bs, choice.band_hz, choice.kurtosis, angle=angle, shaft_hz=shaft_hz), "searched", None
