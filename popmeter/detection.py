"""Streaming detection of diaphragm clicks, to the sample.

One :class:`ClickDetector` serves a whole file and a live stream: it is fed
blocks of samples of any size, carries its state between them and returns the
clicks it has finalised.  Given the same samples it gives the same clicks
whatever the block size (every decision is tied to fixed frame numbers, never
to block edges), and it keeps only a bounded history (a fraction of a second
of audio, two seconds of bin levels).

The steps, and the published method each follows:

1. **Fine time-frequency grid.**  The stream is decimated to about 24 kHz
   (triangular FIR, carried history) and cut into Hann frames of 10.7 ms at
   a hop of 2 ms; each frame's power spectrum gives one level per STFT bin
   (dB re a full-scale sine) from 400 Hz to about 10 kHz.  Each bin is one
   narrow detection channel: a plate ring lives in a bin or two, so watching
   the bins separately keeps most of the noise out (the spectrum-analysis
   view of energy-rise onset detection, Bello et al., "A tutorial on onset
   detection in music signals", IEEE TSAP 2005, section III-B).
2. **Onset envelope**: per bin, the level above the bin's running median
   (the noise floor), kept only where the level also *rises* by
   ``min_rise_db`` against the maximum of the frames 6-8 ms earlier (the
   log spectral-flux rise of Dixon, "Onset detection revisited", DAFx 2006,
   with the reference maximum-filtered in time after Böck & Widmer,
   "Maximum filter vibrato suppression for onset detection", DAFx 2013), and
   where it stands clear of the bin's robust spread (median absolute
   deviation x 1.4826, Hampel 1974) and of the frame's window side lobes.
   The detection function is the largest such value over the bins.
3. **Adaptive threshold from robust local statistics**: median and MAD per
   bin over the preceding 2 s, refreshed every 0.5 s, causal; nothing
   depends on the file's length.  For Gaussian noise a periodogram bin is
   exponentially distributed, so it passes its median by x dB with
   probability exp(-ln 2 * 10^(x/10)) (Brockwell & Davis, "Time Series:
   Theory and Methods", 1991, section 10.3): 13 dB (``threshold_db``) makes a
   noise frame a candidate about once in 10^6 bins.
4. **The band where the clicks live, learnt on the way**: every 1 s (fixed
   frame numbers) the bins where the strong candidates rang are noted;
   within those bins a lower threshold (``weak_threshold_db``, 8 dB) finds
   the weaker clicks of startup and fade.  ``band_hz`` forces the band.
5. **Peak picking** with a refractory time ``1 / max_rate_hz``: a frame is a
   candidate when its value is the largest within plus or minus the
   refractory time (the max-filter peak picker of Böck, Krebs & Schedl,
   ISMIR 2012, as in ``librosa.util.peak_pick``).
6. **Sample-accurate onset**: first the energy peak of the band where the
   candidate rang (complex demodulation at that bin's frequency, 1 ms
   average), which in noise is far more reliable than the broadband peak;
   then the Akaike-information-criterion change-point picker on the
   high-passed waveform in the 8 ms before that peak (Maeda 1985; the
   two-segment form used by Sleeman & van Eck, PEPI 1999, computed with
   cumulative sums): the onset is the sample that best splits "noise before"
   from "signal after".
7. **Features** of each click: peak level (dBFS), strength (the onset
   envelope's height above the floor, dB), ring frequency (largest peak of
   the zero-padded spectrum of the 24 ms tail, refined by quadratic
   interpolation of the log magnitude, Smith & Serra, "PARSHL", ICMC 1987),
   decay time (1/e amplitude time from a least-squares line through the
   ring's envelope in dB, the envelope from complex demodulation at the ring
   frequency: an exponential ring is a straight line there).
8. **Rejection** of transients that are not clicks: a click reaches its
   envelope peak within ``max_attack_s``, its tail is tonal (the spectral
   peak stands ``min_tonality_db`` above the median of its neighbourhood)
   and rings clearly above what the same bins held just before the onset
   (``min_ring_snr_db``).  Match strikes and splashes (noise), speech
   (formants that were already there) fail.  The whole-recording functions
   add :func:`reject_atypical` (drop clicks whose ring matches no family of
   the recording's own clicks: a knock rings far lower) and a second look
   that takes back rejected candidates ringing exactly like an accepted
   family (short, bright second clicks), but not one a few milliseconds
   from a click the matched filter (step 9) found: in a reverberant room
   that candidate is the room's answer to a main click, just before the
   second click.  Once an engine is found to give
   one click per cycle, a quieter click within half a period after the last
   click kept, or between two clicks a period apart, is an echo and is set
   aside (:func:`_one_per_cycle`).

9. **Matched-filter pass with the recording's own click** (North 1943;
   Turin, "An introduction to matched filters", IRE Trans. IT-6, 1960): once
   32 clicks have been accepted, their aligned average is the main template
   (and, from accepted or nearly accepted clicks unlike it, a second
   template for the brighter second click of a two-click engine).  The
   decimated stream is correlated with each template in fixed 2 s chunks and
   the envelope of the output (read at every second sample) is thresholded
   against its own robust noise level (Rayleigh statistics); the clicks a
   frame detector misses (startup and fade pops, second clicks) stand out
   there because the template gathers the whole ring's energy.  Once the
   second click's delay (as a fraction of the period) is known, a narrow
   window at each expected second click is searched with a lower threshold.
   A second click too weak for the frame detector is found by folding: the
   band energy of 64 or more cycles averaged by phase (synchronous
   averaging) shows where in the cycle it lies, and its template is averaged
   from there (in a room, band-limited to the octave where what rose there
   rose most, when the average still rings like the main click; refused,
   and no fold tried again, when it rings under 0.8 of the main click's
   ring: no mode of the diaphragm lies below the one the main click rings
   at, so it is the room answering each click).  The first
   up to 30 s are kept so that the clicks before the
   templates existed are found too.  See
   :class:`_TemplateScan`.  These clicks join in the whole-recording passes
   (:func:`finish_detection`), not in ``process``'s output.

Latency of the streaming detector: a click is finalised once
``max_latency_s`` of audio after its onset has arrived (50 ms at 48 kHz with
the defaults: the 12 ms refractory look-ahead, the 10.7 ms frame, 6 ms of
onset search and the 20 ms ring tail), plus the block in which those samples
arrive.  The matched-filter clicks reach :func:`finish_detection` up to 2 s
later (one chunk), or up to 30 s later for clicks before the templates
formed.
"""

from __future__ import annotations

import bisect
import math
import statistics
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field

import numpy as np
import scipy.fft as sp_fft
from scipy import signal, special

from popmeter.errors import UsageError

__all__ = [
    "Click",
    "ClickDetector",
    "DetectionResult",
    "assign_kinds",
    "detect_clicks",
    "detect_clicks_in_blocks",
    "finish_detection",
    "reject_atypical",
]

_MAD_TO_SIGMA = 1.4826  # MAD of a Gaussian = 0.6745 sigma (Hampel 1974)
_DB_PER_NEPER = 20.0 / math.log(10.0)  # 8.686 dB per neper of amplitude
# Hann side lobes fall below -31 dB at once and -60 dB within a few bins
# (Harris, Proc. IEEE 66, 1978): a bin 40 dB under the frame's top is leakage.
_LEAK_DB = 40.0
_ABS_FLOOR_DB = -110.0  # bin level (dB re a full-scale sine) below which nothing is a click
# a click whose peak is at full scale (the detector counts samples at or
# beyond 0.9999 as clipped: 20 log10(0.9999) = -0.0009 dB)
_FULL_SCALE_DBFS = -0.001
# frames transformed together in the frame stage: 512 rows of 256 samples
# (0.5 MB of float32) and their spectra stay in a processor's cache
_STFT_ROWS = 512
# two families ringing within 3 % (in log frequency) ring alike: a reflection
# keeps its click's spectrum (our own bar, no published source; see
# _quieter_rings_like_louder and _TemplateScan.second_rings_like_main)
_SAME_RING_LOG = 0.03
# a two-click decision whose second clicks are found in fewer cycles than
# this share of the main clicks' is flagged (our own bar, no published source:
# on the bench's 432 recordings the one wrong two-click decision, a one-click
# engine in a reverberant room, showed second clicks in 15 % of the cycles,
# and another such room (45 s, seed 1) 38 %; of the 210 right two-click
# decisions, three (reverberant rooms at 12-20 dB) were under 40 %, the
# lowest at 25 %)
_WEAK_SECOND_SHARE = 0.4
# the fewest whole cycles (about a third of the fold's 28 s window at 16
# cycles a second) the free scan's main clicks must leave a fold from its
# fifth on, before the main clicks found between known ones join them (our
# own bar, no published source: of the bench's 24 two-click engines in a
# reverberant room at 12 dB, the 18 whose fold formed a template saw 129-276
# cycles there, the last folds of the other 6 saw 20-110; letting the
# fill-ins join every fold, from the first, changed templates that had
# formed from the surer clicks alone, and made some worse)
_FOLD_FEW_CYCLES = 150


@dataclass(slots=True)
class Click:
    """One detected diaphragm click.

    Attributes
    ----------
    time_s : float
        Onset time in seconds from the start of the stream (``sample / fs``).
    sample : int
        Onset as a sample index (the first sample of the click's attack).
    level_dbfs : float
        Peak absolute sample value within 5 ms of the onset, in dB re full
        scale (0 dBFS = 1.0).
    strength : float
        Detection confidence: the height of the onset envelope at the click
        above the bin's running median (dB); at least ``weak_threshold_db``,
        20-30 dB for a clear click.
    ring_hz : float or None
        Dominant ring frequency of the ringing tail, in Hz; ``None`` if the
        tail held no clear peak.
    decay_s : float or None
        Time for the ring's amplitude to fall by 1/e, in seconds; ``None`` if
        the tail was too short or too noisy to fit.
    kind : int
        0 for a main click, 1 for the second click of a two-click engine
        (set by :func:`assign_kinds`).
    cycle : int or None
        Index of the cycle (the index of its main click); ``None`` until
        :func:`assign_kinds` has run, or for a second click before any main
        click.
    """

    time_s: float
    sample: int
    level_dbfs: float
    strength: float
    ring_hz: float | None
    decay_s: float | None
    kind: int = 0
    cycle: int | None = None


@dataclass
class DetectionResult:
    """Clicks of one recording and what the detector learnt on the way.

    Attributes
    ----------
    clicks : list of Click
        In time order, with ``kind`` and ``cycle`` assigned.
    clicks_per_cycle : int
        1 or 2 (decided from the clicks, or forced).
    rejected : int
        Candidate transients rejected as not being clicks.
    band_hz : (float, float)
        Where the clicks ring (Hz): the forced band, or the 5th-95th
        percentile of the clicks' ring frequencies widened by 10 % (the
        watched range when there are fewer than 3 clicks).
    ring_hz : float or None
        Median ring frequency of the main clicks (Hz); ``None`` without clicks.
    warnings : list of str
        Plain-language remarks (no clicks, clipping...).
    rejected_times_s : list of float
        Times of the rejected candidates (seconds).
    duration_s : float
        Length of audio analysed (seconds).
    clipped_samples : int
        Samples at or beyond full scale.
    """

    clicks: list[Click]
    clicks_per_cycle: int
    rejected: int
    band_hz: tuple[float, float]
    ring_hz: float | None
    warnings: list[str]
    rejected_times_s: list[float] = field(default_factory=list)
    duration_s: float = 0.0
    clipped_samples: int = 0


@dataclass
class _Candidate:
    frame: int
    z: float
    band: int
    strong: bool = True
    ring_range_hz: tuple[float, float] | None = None


class ClickDetector:
    """Streaming click detector (state carried between blocks).

    Parameters
    ----------
    sample_rate_hz : float
        Sample rate of the stream in Hz (8 kHz or more).
    band_hz : (float, float) or None
        Force the detection band (Hz).  Default ``None``: watch every STFT
        bin from 400 Hz to about 10 kHz and learn where the clicks ring.
    max_rate_hz : float
        Highest plausible click rate (clicks per second); its inverse is the
        refractory time.  Default 80: engines run at up to about 20-30
        cycles per second, two clicks per cycle, with a margin (common
        practice, no source).
    threshold_db : float
        Height of the onset envelope above a bin's running median (dB) that
        makes a candidate in any bin.  Default 13 dB: about one noise bin in
        a million passes (exponential periodogram, see the module notes).
    weak_threshold_db : float
        The same within the bins where the clicks so far rang; default 8 dB
        (the search is narrower, so more of the weak clicks can be taken).
    min_rise_db : float
        Least band-energy rise (dB over about 6 ms) for a candidate; default
        6 dB keeps tiny rises in near-silence out.
    highpass_hz : float
        Corner of the high-pass used for onset refinement and features
        (Hz); default 300 Hz removes mains hum and rumble.
    max_attack_s : float
        A click's envelope must peak within this time after its onset;
        default 3 ms (plate rings build up in a fraction of a millisecond,
        speech and splashes take tens).
    min_tonality_db : float
        Least height of the tail's spectral peak above the median of the
        spectrum within +-25 % of its frequency (dB); default 10 dB (on
        generated recordings noise bursts stay near 4-9 dB, clicks at
        15-20 dB).
    min_ring_snr_db : float
        Least energy ratio (dB) of the ring's bins in the 24 ms after the
        onset to the same bins in the 24 ms before it; default 8 dB.
    reject : bool
        Apply the rejection tests (default True).  With False every
        candidate becomes a click.
    template_scan : bool
        Run the matched-filter pass with the recording's own click templates
        (module notes, step 9); default True.  Off when ``reject`` is False.
    template_threshold : float
        Height of the matched-filter envelope over its noise level that makes
        a click; default 5: the envelope of Gaussian noise is Rayleigh
        distributed and passes 5 times its scale with probability
        exp(-12.5) = 4e-6 per independent sample (about one false click in
        5 minutes at the output's bandwidth, before the other tests).

    Attributes
    ----------
    rejected : int
        Candidates rejected so far.
    rejected_times_s : list of float
        Their onset times (seconds).
    samples_seen : int
        Samples fed so far.
    clipped_samples : int
        Samples at or beyond full scale so far.
    max_latency_s : float
        Audio needed after a click's onset before it is reported (seconds).
    """

    def __init__(
        self,
        sample_rate_hz: float,
        *,
        band_hz: tuple[float, float] | None = None,
        max_rate_hz: float = 80.0,
        threshold_db: float = 13.0,
        weak_threshold_db: float = 8.0,
        min_rise_db: float = 6.0,
        highpass_hz: float = 300.0,
        max_attack_s: float = 0.003,
        min_tonality_db: float = 10.0,
        min_ring_snr_db: float = 8.0,
        reject: bool = True,
        template_scan: bool = True,
        template_threshold: float = 5.0,
    ) -> None:
        fs = float(sample_rate_hz)
        if not fs >= 8000.0:
            raise UsageError(f"sample rate {sample_rate_hz} Hz: the click detector needs 8 kHz "
                             "or more")
        if not max_rate_hz > 0:
            raise UsageError(f"max_rate_hz={max_rate_hz}: must be positive")
        self.sample_rate_hz = fs
        self.threshold_db = float(threshold_db)
        self.weak_threshold_db = min(float(weak_threshold_db), self.threshold_db)
        self.min_rise_db = float(min_rise_db)
        self.max_attack_s = float(max_attack_s)
        self.min_tonality_db = float(min_tonality_db)
        self.min_ring_snr_db = float(min_ring_snr_db)
        self.reject = bool(reject)

        # decimated analysis stream
        self._q = max(1, int(fs // 20000.0))
        fs_d = fs / self._q
        self._fs_d = fs_d
        self._hop_d = max(1, round(0.002 * fs_d))  # <= 2 ms
        self.hop = self._hop_d * self._q  # in input samples
        self._n_fft = int(2 ** round(math.log2(0.0107 * fs_d)))
        self._win = np.hanning(self._n_fft + 2)[1:-1].astype(np.float32)
        scale = (float(np.sum(self._win)) / 2.0) ** 2  # full-scale sine -> 0 dB
        self._scale = 1.0 / scale
        self._lag = 3
        # anti-alias: triangular FIR (boxcar * boxcar, length 2q - 1), zero at
        # the decimated Nyquist's images; cheap, and the watched band stops at
        # 0.42 of the decimated rate, where it still passes 4 dB down
        box = np.ones(self._q)
        self._aa = (np.convolve(box, box) / self._q ** 2).astype(np.float64)
        self._aa32 = self._aa.astype(np.float32)  # (the taps as the filter applies them)
        self._aa_hist = np.zeros(len(self._aa) - 1, dtype=np.float32)

        # watched frequency range: one STFT bin per detection channel
        freqs = np.fft.rfftfreq(self._n_fft, 1.0 / fs_d)
        top = min(8000.0, 0.42 * fs_d)
        if band_hz is not None:
            lo, hi = float(band_hz[0]), float(band_hz[1])
            if not (0 < lo < hi):
                raise UsageError(f"band {band_hz}: need 0 < low < high (Hz)")
            if lo >= 0.45 * fs_d:
                raise UsageError(f"band {lo:g}-{hi:g} Hz lies above what the detector watches "
                                 f"({0.45 * fs_d:g} Hz at this sample rate)")
            self._forced = (lo, hi)
        else:
            lo, hi = 400.0, top
            self._forced = None
        b0 = max(1, int(np.searchsorted(freqs, lo)))
        b1 = max(b0 + 1, int(np.searchsorted(freqs, min(hi, 0.45 * fs_d), side="right")))
        self._bin_lo, self._bin_hi = b0, b1
        self._bin_hz = freqs[b0:b1]
        self._df = fs_d / self._n_fft
        nb = b1 - b0
        self._k_mad = 1.6

        # refinement stream (high-passed, full rate)
        hp = min(float(highpass_hz), 0.25 * fs)
        if band_hz is not None:
            hp = min(hp, 0.5 * float(band_hz[0]))
        self._hp_sos = signal.butter(2, hp, "highpass", fs=fs, output="sos")
        self._hp_hz = hp

        # timing constants (input samples)
        self._refr = max(1, round(fs / max_rate_hz / self.hop))  # frames
        self._pre = round(0.008 * fs)
        self._post = round(0.001 * fs)
        self._tail = round(0.020 * fs)
        self._bp_len = max(4, round(0.001 * fs))  # 1 ms: the band of the coarse onset
        self._nfft_ring = int(2 ** math.ceil(math.log2(self._tail)))
        self._tapers: dict[int, np.ndarray] = {}
        self._nfft_short = int(2 ** math.ceil(math.log2(1.5 * 0.006 * fs)))
        # the complex demodulation phasors of the coarse onset (_measure), one
        # row per STFT bin, over the onset search region and one average's length
        n_dem = self._n_fft * self._q + 3 * self.hop + self._bp_len
        self._demod = np.exp((-2j * math.pi / fs) * self._bin_hz[:, None]
                             * np.arange(n_dem)[None, :]).astype(np.complex64)

        self._frame_span = self._n_fft * self._q
        self.max_latency_s = (self._refr * self.hop + self._frame_span + 3 * self.hop
                              + self._tail + self._post) / fs
        f_ring = np.arange(self._nfft_ring // 2 + 1) * fs / self._nfft_ring
        self._ring_bins = (int(np.searchsorted(f_ring, 0.8 * self._hp_corner())),
                           int(np.searchsorted(f_ring, min(12000.0, 0.45 * fs))))
        f_short = np.arange(self._nfft_short // 2 + 1) * fs / self._nfft_short
        self._short_bins = (int(np.searchsorted(f_short, 0.8 * self._hp_corner())),
                            int(np.searchsorted(f_short, min(12000.0, 0.45 * fs))))
        self._checkpoint = round(1.0 / 0.002)  # frames between learning updates
        self._next_cp = self._checkpoint
        self._typ_current: np.ndarray | None = None

        # statistics schedule (frames)
        self._stat_win = round(2.0 / 0.002)
        self._stat_every = round(0.5 / 0.002)
        self._stat_first = 25
        self._med = np.zeros(nb)
        self._sig = np.ones(nb)
        self._have_stats = False

        # state
        self.samples_seen = 0
        self.clipped_samples = 0
        self.rejected = 0
        self.rejected_times_s: list[float] = []
        self._x = np.zeros(0, dtype=np.float32)  # raw, from _x0
        self._y = np.zeros(0, dtype=np.float32)  # high-passed, from _x0
        self._hp_zi = np.zeros((self._hp_sos.shape[0], 2))
        self._x0 = 0
        self._d = np.zeros(0, dtype=np.float32)  # decimated, from _d0
        self._d0 = 0
        self._n_dec = 0  # decimated samples produced
        self._frames = 0  # frames computed
        self._L_tail = np.full((self._lag + 1, nb), np.inf, dtype=np.float32)  # last levels
        self._lev_ring = np.zeros((self._stat_win, nb), dtype=np.float32)
        self._lev_pending: list[tuple[int, np.ndarray]] = []
        self._z_hist = np.zeros(0)  # combined z, frames [_z0, _frames)
        self._zb_hist = np.zeros(0, dtype=np.int64)
        self._z0 = 0
        self._decided = 0  # frames decided by the peak picker
        self._pending: list[_Candidate] = []
        self._out: list[Click] = []
        self._over_hist = np.zeros((0, nb), dtype=np.float32)
        self._strong_hist: list[tuple[int, int]] = []
        self._typ_key: tuple[int, int] | None = None
        self._typ_cache: np.ndarray | None = None
        self._last_onset = -(10 ** 12)
        self._debug: list[dict] | None = None
        # rejected candidates with a clear onset and ring, for the whole-recording
        # second look (:func:`_result`): they count if they ring like a family
        # of the recording's accepted clicks
        self._second_look: list[Click] = []
        self._bin_votes = np.zeros(nb, dtype=np.int64)
        self._flushed = False
        self._mf = (_TemplateScan(fs, self._q, fs_d, threshold=float(template_threshold))
                    if template_scan and reject else None)

    # ------------------------------------------------------------------ public

    @property
    def band_hz(self) -> tuple[float, float] | None:
        """The detection band (Hz): forced, or the bank band that found most clicks so far."""
        if self._forced is not None:
            return self._forced
        total = int(self._bin_votes.sum())
        if total == 0:
            return None
        cum = np.cumsum(self._bin_votes) / total
        lo = self._bin_hz[int(np.searchsorted(cum, 0.1))] - self._df
        hi = self._bin_hz[int(np.searchsorted(cum, 0.9))] + self._df
        return (float(max(lo, 0.0)), float(hi))

    def process(self, block: np.ndarray) -> list[Click]:
        """Feed one block of samples; return the clicks finalised by it.

        Parameters
        ----------
        block : np.ndarray
            1-D samples (float, full scale 1.0), any length (0 allowed).

        Returns
        -------
        list of Click
            Clicks whose ring tail is now complete, in time order
            (``kind`` 0 and ``cycle`` None: see :func:`assign_kinds`).
        """
        if self._flushed:
            raise UsageError("ClickDetector.process called after flush()")
        x = np.asarray(block, dtype=np.float32).reshape(-1)
        if x.size == 0:
            return []
        lo, hi = x.min(), x.max()  # (NaN if any sample is)
        if not (np.isfinite(lo) and np.isfinite(hi)):
            x = np.nan_to_num(x, nan=0.0, posinf=1.0, neginf=-1.0)
            lo, hi = x.min(), x.max()
        if hi >= 0.9999 or lo <= -0.9999:
            self.clipped_samples += int(np.count_nonzero(np.abs(x) >= 0.9999))
        start = self.samples_seen
        self.samples_seen += x.size
        self._x = np.concatenate([self._x, x])
        y, self._hp_zi = signal.sosfilt(self._hp_sos, x, zi=self._hp_zi)
        self._y = np.concatenate([self._y, y], dtype=np.float32)
        # decimate: FIR with carried history, keep samples whose index is a multiple of q
        if self._q > 1:
            q = self._q
            taps = len(self._aa)
            first = (-start) % q  # offset in x of the first kept sample
            count = max(0, (x.size - first + q - 1) // q)
            # output at input index i: sum_j h[j] x[i - j] (causal FIR), summed
            # from zero in the order of j; the first outputs reach back into the
            # carried history (ext: the history, then the block's first
            # samples; input index i at i + taps - 1), the others read x alone
            n_head = min(count, max(0, -(-(taps - 1 - first) // q)))
            ext = np.concatenate([self._aa_hist, x[:first + n_head * q]])
            self._aa_hist = (x[x.size - (taps - 1):].copy() if x.size >= taps - 1
                             else np.concatenate([self._aa_hist, x])[-(taps - 1):])
            dec = np.zeros(count, dtype=np.float32)
            term = np.empty(count, dtype=np.float32)
            head, rest = dec[:n_head], dec[n_head:]
            for j in range(taps if n_head else 0):
                at = first + taps - 1 - j
                head += np.multiply(self._aa32[j], ext[at:at + (n_head - 1) * q + 1:q],
                                    out=term[:n_head])
            for j in range(taps if rest.size else 0):
                at = first + n_head * q - j
                rest += np.multiply(self._aa32[j], x[at:at + (rest.size - 1) * q + 1:q],
                                    out=term[n_head:])
        else:
            dec = x
        self._d = np.concatenate([self._d, dec])
        self._n_dec += dec.size
        if self._mf is not None:
            self._mf.feed(dec)
        self._analyse(final=False)
        out = self._finalise(final=False)
        self._advance_scan(final=False)
        return out

    def flush(self) -> list[Click]:
        """End of stream: analyse what is left and return the last clicks.

        The stream is padded with silence to complete the last frames; a
        click too close to the end gets its features from the samples there
        are.
        """
        if self._flushed:
            return []
        self._flushed = True
        pad = self._frame_span + self._lag * self.hop
        pad_dec = pad // self._q + 1
        self._d = np.concatenate([self._d, np.zeros(pad_dec, dtype=np.float32)])
        self._n_dec += pad_dec
        self._analyse(final=True)
        out = self._finalise(final=True)
        self._advance_scan(final=True)
        return out

    def _advance_scan(self, *, final: bool) -> None:
        if self._mf is None:
            return
        if final:
            done = math.inf
        else:
            fr = self._pending[0].frame if self._pending else self._decided
            done = fr * self.hop - self._pre  # every later onset lies beyond this sample
        self._mf.advance(done, final=final)

    # ---------------------------------------------------------------- analysis

    def _analyse(self, *, final: bool) -> None:
        n = self._n_fft
        h = self._hop_d
        avail = (self._n_dec - n) // h + 1 if self._n_dec >= n else 0
        if final:
            # frames starting within the real stream only
            last_start = self.samples_seen // self._q
            avail = min(avail, last_start // h + 1)
        if avail > self._frames:
            f0 = self._frames
            off = f0 * h - self._d0
            seg = self._d[off:off + (avail - f0 - 1) * h + n]
            frames = np.lib.stride_tricks.sliding_window_view(seg, n)[::h]
            levels = self._frame_levels(frames)
            lag = self._lag
            m = lag + 1
            nf = levels.shape[0]
            # the reference of frame t, max(L[t - lag], L[t - lag - 1]): rows
            # k + 1 and k of the levels of frames f0 - m ... (the kept tail, then
            # this block's), without joining them: the first m frames from the
            # tail and this block's start, the others from this block alone
            head = np.vstack([self._L_tail, levels[:m]])
            rise = np.empty_like(levels)
            np.fmax(head[1:1 + min(m, nf)], head[:min(m, nf)], out=rise[:m])
            if nf > m:
                np.fmax(levels[1:nf - lag], levels[:nf - m], out=rise[m:])
            # (the first frames compare with -inf: no rise is counted there)
            np.subtract(levels, rise, out=rise)
            self._L_tail = (levels[-m:].copy() if nf >= m
                            else np.vstack([self._L_tail, levels])[-m:])
            self._frames = avail
            # ring buffer of the last stat_win frames' levels (row = frame mod stat_win);
            # written in the order the statistics schedule needs them
            self._lev_pending.append((f0, levels))
            # the onset envelope per bin, written after the kept history (float32:
            # level minus median, both float32; every reader takes the values as
            # they are or in float64, which holds them exactly)
            kept = self._over_hist.shape[0]
            over = np.zeros((kept + levels.shape[0], levels.shape[1]), dtype=np.float32)
            over[:kept] = self._over_hist
            z, zb = self._zscores(f0, rise, levels, over[kept:])
            self._over_hist = over
            self._z_hist = np.concatenate([self._z_hist, z])
            self._zb_hist = np.concatenate([self._zb_hist, zb])
            # trim decimated buffer: keep from the next frame start
            cut = self._frames * h - self._d0
            if cut > 0:
                self._d = self._d[cut:]
                self._d0 += cut
        self._pick(final=final)

    def _frame_levels(self, frames: np.ndarray) -> np.ndarray:
        """Level (dB re a full-scale sine) of each watched bin of each frame (rows).

        Windowed, transformed and squared ``_STFT_ROWS`` frames at a time:
        the same values as on all the rows at once (each row's transform
        is its own), but the work stays in the processor's cache (the
        arrays of a whole 5.5 s block are megabytes): on a 300 s file this
        step went from about 140 to 115 ms (line profiler, 3 runs).
        """
        nf = frames.shape[0]
        levels = np.empty((nf, self._bin_hi - self._bin_lo), dtype=np.float32)
        buf = np.empty((min(nf, _STFT_ROWS), frames.shape[1]), dtype=np.float32)
        for a in range(0, nf, _STFT_ROWS):
            rows = frames[a:a + _STFT_ROWS]
            w = buf[:rows.shape[0]]
            np.multiply(rows, self._win, out=w)
            watched = sp_fft.rfft(w, axis=1)[:, self._bin_lo:self._bin_hi]
            # dB of the watched bins' power, computed in place
            lv = levels[a:a + rows.shape[0]]
            np.square(watched.real, out=lv)
            lv += watched.imag ** 2
            lv *= np.float32(self._scale)
            lv += np.float32(1e-13)
            np.log10(lv, out=lv)
            lv *= 10.0
        return levels

    def _zscores(self, f0: int, rise: np.ndarray, levels: np.ndarray, ov: np.ndarray
                 ) -> tuple[np.ndarray, np.ndarray]:
        """Detection function (z) and its bin (zb) per frame; per bin values into ``ov``.

        ``ov`` (frames x bins, zeros) receives the gated onset envelope.
        """
        nf = rise.shape[0]
        z = np.zeros(nf)
        zb = np.zeros(nf, dtype=np.int64)
        # the statistics are refreshed at fixed frames, each time from the
        # levels before that frame: first the statistics in force in each
        # stretch of frames, then the frames gated together
        meds: list[np.ndarray] = []
        gates: list[np.ndarray] = []
        counts: list[int] = []
        t = f0
        end = f0 + nf
        while t < end:
            if self._is_update(t):
                self._update_stats(t)
            seg_end = min(end, self._next_update(t))
            if self._have_stats:
                meds.append(self._med)
                gates.append(self._gate)
                counts.append(seg_end - t)
            t = seg_end
        if not counts:
            return z, zb
        i0 = nf - sum(counts)  # the first frame with statistics
        r = rise[i0:]
        lev = levels[i0:]
        # gates: a real rise, above the bin's robust spread, and not a window
        # side-lobe of a far stronger bin (in near-silence the floor is so low
        # that leakage would pass)
        over = np.empty_like(lev)
        ok = np.empty(lev.shape, dtype=bool)
        a = 0
        for med, gate, count in zip(meds, gates, counts):
            np.subtract(lev[a:a + count], med, out=over[a:a + count])
            np.greater_equal(over[a:a + count], gate, out=ok[a:a + count])
            a += count
        floor = np.maximum(lev.max(axis=1, keepdims=True) - _LEAK_DB, _ABS_FLOOR_DB)
        ok &= r >= self.min_rise_db
        ok &= lev >= floor
        zz = ov[i0:]  # (zero where a gate fails)
        np.copyto(zz, over, where=ok)
        best = np.argmax(zz, axis=1)
        z[i0:] = zz[np.arange(zz.shape[0]), best]
        zb[i0:] = best
        return z, zb

    def _is_update(self, t: int) -> bool:
        if t <= 0:
            return False
        if t < self._stat_every:
            return t % self._stat_first == 0
        return t % self._stat_every == 0

    def _next_update(self, t: int) -> int:
        if t < self._stat_every:
            return (t // self._stat_first + 1) * self._stat_first
        return (t // self._stat_every + 1) * self._stat_every

    def _fill_ring(self, t: int) -> None:
        """Write levels of frames < t into the ring buffer."""
        w = self._stat_win
        while self._lev_pending:
            f0, lv = self._lev_pending[0]
            end = min(t, f0 + lv.shape[0])
            if end <= f0:
                break
            start = max(f0, end - w)
            # rows start % w onwards, wrapping round to row 0
            at = start % w
            n_end = min(end - start, w - at)
            self._lev_ring[at:at + n_end] = lv[start - f0:start - f0 + n_end]
            self._lev_ring[:end - start - n_end] = lv[start - f0 + n_end:end - f0]
            if end == f0 + lv.shape[0]:
                self._lev_pending.pop(0)
            else:
                self._lev_pending[0] = (end, lv[end - f0:])
                break

    def _update_stats(self, t: int) -> None:
        self._fill_ring(t)
        rows = self._lev_ring[:t] if t < self._stat_win else self._lev_ring
        rows = rows[::8] if rows.shape[0] >= 400 else rows
        rows = np.ascontiguousarray(rows.T)  # bins x frames (order is irrelevant to a median)
        # the (upper) median as an order statistic; numpy's vectorised sort of
        # these short rows is faster than its partition
        h = rows.shape[1] // 2
        med = np.sort(rows, axis=1)[:, h]
        mad = np.sort(np.abs(rows - med[:, None]), axis=1)[:, h]
        self._med = med.astype(np.float32)
        self._sig = np.maximum(_MAD_TO_SIGMA * mad, 0.5).astype(np.float32)
        self._gate = (self._k_mad * self._sig).astype(np.float32)
        self._have_stats = True

    def _pick(self, *, final: bool) -> None:
        r = self._refr
        upto = self._frames if final else self._frames - r
        if upto <= self._decided:
            return
        z = self._z_hist
        z0 = self._z0
        over = self._over_hist
        thr = self.threshold_db
        weak = self.weak_threshold_db
        zz = z[self._decided - z0:upto - z0]
        left = z[max(0, self._decided - z0 - 1):upto - z0 - 1]
        if left.size < zz.size:
            left = np.concatenate([[-1.0], left])
        right = z[self._decided - z0 + 1:upto - z0 + 1]
        if right.size < zz.size:
            right = np.concatenate([right, [-1.0]])
        # candidates are local maxima of the detection function (over all bins)
        hits = np.nonzero((zz >= weak) & (zz >= left) & (zz >= right))[0] + self._decided
        # the strong test, vectorised: the largest z within +-r frames (earlier
        # frames must be strictly lower, later ones not higher)
        zpad = np.concatenate([np.full(r, -np.inf), z, np.full(r, -np.inf)])
        hz = hits - z0 + r
        zh = zpad[hz]
        if hits.size:
            left = zpad[hz[:, None] + np.arange(-r, 0)[None, :]].max(axis=1)
            right = zpad[hz[:, None] + np.arange(1, r + 1)[None, :]].max(axis=1)
            strong = (zh >= thr) & (zh > left) & (zh >= right)
            near_strong = (np.maximum(left, right) >= thr) | (zh >= thr)
        else:
            strong = near_strong = np.zeros(0, dtype=bool)
        # learning checkpoints: the first hit at or after a checkpoint takes the
        # bins where the strong candidates before the checkpoint rang; fixed
        # frame numbers, so the same whatever the block size.  Between two
        # checkpoints the typical bins stay, so the hits are judged by groups.
        ck = self._checkpoint
        group = hits // ck
        cuts = (np.flatnonzero(np.diff(group)) + 1).tolist()
        firsts = [0, *cuts] if hits.size else []
        for i0, i1 in zip(firsts, [*cuts, hits.size]):
            g = int(group[i0])
            if g * ck >= self._next_cp:
                self._typ_current = self._typical_bins(g * ck)
                self._next_cp = (g + 1) * ck
            t_g, strong_g = hits[i0:i1], strong[i0:i1]
            # weak candidates, where no strong one is near: the largest value
            # over the typical bins within +-r frames (earlier frames strictly
            # lower, later ones not higher)
            typ = self._typ_current
            weak_g = np.zeros(t_g.size, dtype=bool)
            if typ is not None:
                maybe = np.flatnonzero(~near_strong[i0:i1])
                if maybe.size:
                    # per frame from r before the first to r after the last,
                    # the largest value over the typical bins (-inf outside
                    # the frames kept)
                    tw = t_g[maybe] - z0
                    a, b = int(tw[0]) - r, int(tw[-1]) + r + 1
                    a_in, b_in = max(a, 0), min(b, over.shape[0])
                    typ_max = np.full(b - a, -np.inf)
                    typ_max[a_in - a:b_in - a] = over[a_in:b_in, typ].max(axis=1)
                    tw -= a
                    zt2 = typ_max[tw]
                    left = typ_max[tw[:, None] + np.arange(-r, 0)[None, :]].max(axis=1)
                    right = typ_max[tw[:, None] + np.arange(1, r + 1)[None, :]].max(axis=1)
                    weak_g[maybe] = (zt2 >= weak) & (zt2 > left) & (zt2 >= right)
            # the candidates in frame order: a strong one takes the detection
            # function's value and bin, a weak one the largest typical bin's
            sel = np.flatnonzero(strong_g | weak_g)
            rows = t_g[sel] - z0
            is_strong = strong_g[sel]
            zc = z[rows]
            bc = self._zb_hist[rows]
            if not is_strong.all():  # (weak ones exist only with typical bins)
                rng = (float(self._bin_hz[typ[0]] - self._df),
                       float(self._bin_hz[typ[-1]] + self._df))
                is_weak = ~is_strong
                ov_typ = over[rows[is_weak][:, None], typ[None, :]]
                zc[is_weak] = ov_typ.max(axis=1)
                bc[is_weak] = typ[np.argmax(ov_typ, axis=1)]
            for t, s_, z_c, b_c in zip((rows + z0).tolist(), is_strong.tolist(), zc.tolist(),
                                       bc.tolist()):
                if s_:
                    self._pending.append(_Candidate(t, z_c, b_c, True))
                    self._strong_hist.append((t, b_c))
                else:
                    self._pending.append(_Candidate(t, z_c, b_c, False, rng))
            if len(self._strong_hist) > 256:  # (the same list as trimming after each append)
                del self._strong_hist[:128 * ((len(self._strong_hist) - 129) // 128)]
        self._decided = upto
        keep_from = max(0, self._decided - r - 1)
        if keep_from > z0:
            self._z_hist = self._z_hist[keep_from - z0:]
            self._zb_hist = self._zb_hist[keep_from - z0:]
            self._over_hist = self._over_hist[keep_from - z0:]
            self._z0 = keep_from

    def _typical_bins(self, limit_frame: int) -> np.ndarray | None:
        """Bins where the strong candidates before frame ``limit_frame`` rang (or None)."""
        hist = self._strong_hist
        n = len(hist)
        while n and hist[n - 1][0] >= limit_frame:
            n -= 1
        if n < 4:
            return None
        key = (n, hist[n - 1][0])
        if self._typ_key == key:
            return self._typ_cache
        bins = np.array([hb for _, hb in hist[max(0, n - 64):n]], dtype=np.int64)
        counts = np.bincount(bins, minlength=len(self._bin_hz))
        need = max(2, math.ceil(0.15 * bins.size))
        sel = counts >= need
        if not sel.any():
            sel = counts == counts.max()
        sel = _with_neighbours(sel)
        typ = np.nonzero(sel)[0]
        self._typ_key = key
        self._typ_cache = typ
        return typ

    def _finalise(self, *, final: bool) -> list[Click]:
        total = self.samples_seen
        # the candidates (in frame order) whose window (_measure) ends within
        # the samples seen: frame * hop + span + 3 hop + tail + post <= total
        last = (total - self._frame_span - 3 * self.hop - self._tail - self._post) // self.hop
        n_ready = (len(self._pending) if final
                   else bisect.bisect_right(self._pending, last, key=lambda c: c.frame))
        ready = self._pending[:n_ready]
        del self._pending[:n_ready]
        if ready:
            self._out.extend(self._measure(ready))
        out, self._out = self._out, []
        # trim sample buffers
        if self._pending:
            first = self._pending[0].frame * self.hop - self._pre - 2 * self.hop - self._frame_span
        else:
            first = self._decided * self.hop - self._pre - 2 * self.hop - self._frame_span
        first = min(first, total - self._pre - self._frame_span)
        first -= self._nfft_ring
        if first > self._x0:
            cut = first - self._x0
            self._x = self._x[cut:]
            self._y = self._y[cut:]
            self._x0 = first
        return out

    def _span(self, starts: np.ndarray, length: int, *, high_passed: bool = False
              ) -> tuple[np.ndarray, np.ndarray]:
        """The kept samples (raw or high-passed) and where each window starts in them.

        Window i, the stream's samples [starts[i], starts[i] + length) with
        zeros outside the kept ones, is ``buf[at[i]:at[i] + length]``.
        """
        x = self._y if high_passed else self._x
        at = starts - self._x0
        if not at.size or (at.min() >= 0 and at.max() + length <= x.size):  # (the usual case)
            return x, at
        pad_lo, pad_hi = max(0, -int(at.min())), max(0, int(at.max()) + length - x.size)
        return (np.concatenate([np.zeros(pad_lo, dtype=np.float32), x,
                                np.zeros(pad_hi, dtype=np.float32)]), at + pad_lo)

    def _measure(self, cands: list[_Candidate]) -> list[Click]:
        """Onset, features and the click-or-not decision of candidates, in one batch."""
        fs = self.sample_rate_hz
        frames = np.array([c.frame for c in cands], dtype=np.int64)
        # one high-passed window per candidate, wide enough for every step:
        # warm-up | pre-onset noise | search region | ring tail
        search = self._frame_span + 3 * self.hop
        lead = self._tail + self._pre + 2 * self.hop
        length = lead + search + self._tail + self._post
        w0 = frames * self.hop - lead
        y, y_at = self._span(w0, length, high_passed=True)  # window i: y[y_at[i]:][:length]
        s0 = lead
        # coarse: the peak of the energy of the band where the candidate rang
        # within the frame holding the rise (complex demodulation at the bin's
        # frequency, 1 ms moving average: a +-500 Hz band); in noise that band
        # holds far more of the click than the broadband signal, whose own
        # peak may be noise
        nav = self._bp_len
        seg = _rows(y, y_at + s0 - nav // 2, search + nav)
        prod = self._demod[[c.band for c in cands]]  # (a copy, worked on in place)
        prod *= seg
        cs = np.cumsum(prod, axis=1, out=prod)
        band_e = np.abs(cs[:, nav:nav + search] - cs[:, :search])
        pk = s0 + np.argmax(band_e, axis=1)
        # fine: AIC change point (Maeda 1985) on the broadband window [pk - pre, pk + post)
        j = _aic_split_rows(_rows(y, y_at + pk - self._pre, self._pre + self._post))
        on_local = pk - self._pre + j  # index of the onset in its window
        onsets = w0 + on_local
        feats = self._features(y, y_at + on_local, onsets)
        level, rings, decays, attack, tonality, ring_snr, ring_snr_short = (
            feats["level_dbfs"], feats["ring_hz"], feats["decay_s"], feats["attack_s"],
            feats["tonality_db"], feats["ring_snr_db"], feats["ring_snr_short_db"])
        # the tests on whole arrays (a float32 feature meets its threshold in
        # float32, as numpy compares an array with a Python float)
        fails = ((attack > self.max_attack_s) | (tonality < self.min_tonality_db)
                 | (ring_snr < self.min_ring_snr_db)).tolist()
        quick = (attack <= self.max_attack_s).tolist()
        short_ok = (ring_snr_short >= self.min_ring_snr_db - 2.0).tolist()
        levels = level.tolist()
        clicks: list[Click] = []
        notes: list[tuple[int, bool]] = []  # (onset, accepted) for the template scan
        for i, (c, onset) in enumerate(zip(cands, onsets.tolist())):
            if onset - self._last_onset < self._post:
                continue  # the same click found twice
            if self._debug is not None:
                self._debug.append({"time_s": onset / fs, "strong": c.strong, "z": c.z,
                                    **{key: val[i] for key, val in feats.items()}})
            ring = rings[i]
            ok = True
            if self.reject:
                if fails[i]:
                    ok = False
                elif not c.strong:
                    rr = c.ring_range_hz
                    ok = ring is not None and rr is not None and rr[0] <= ring <= rr[1]
            if not ok:
                self.rejected += 1
                self.rejected_times_s.append(onset / fs)
                if (self.reject and ring is not None and quick[i] and (c.strong or short_ok[i])
                        and len(self._second_look) < 200000):
                    notes.append((onset, False))
                    self._second_look.append(Click(
                        time_s=onset / fs, sample=onset, level_dbfs=round(levels[i], 3),
                        strength=round(c.z, 3), ring_hz=ring, decay_s=decays[i]))
                continue
            self._last_onset = onset
            notes.append((onset, True))
            self._bin_votes[c.band] += 1
            clicks.append(Click(time_s=onset / fs, sample=onset, level_dbfs=round(levels[i], 3),
                                strength=round(c.z, 3), ring_hz=ring, decay_s=decays[i]))
        if self._mf is not None:
            self._mf.note_clicks(notes)
        return clicks

    def _features(self, y: np.ndarray, on: np.ndarray, onsets: np.ndarray) -> dict:
        """Per-click features from the high-passed samples ``y`` (onsets at ``y[on]``)."""
        fs = self.sample_rate_hz
        k = on.size
        m = self._tail
        gap = int(0.0005 * fs)
        # level: peak of the raw signal within 5 ms of the onset
        n_raw = int(0.005 * fs)
        raw = _rows(*self._span(onsets, n_raw), n_raw)
        level = 20 * np.log10(np.maximum(np.max(np.abs(raw), axis=1), 1e-10))
        tail = _rows(y, on, m)
        pre = _rows(y, on - gap - m, m)
        taper = self._taper(m)
        spec = sp_fft.rfft(tail * taper, n=self._nfft_ring, axis=1)
        pspec = sp_fft.rfft(pre * taper[::-1], n=self._nfft_ring, axis=1)
        lo_b, hi_b = self._ring_bins
        # (the power only of the bins read: the ring's band here, 7 around its
        # peak below)
        sb = spec[:, lo_b:hi_b]
        band = sb.real ** 2 + sb.imag ** 2
        nbb = band.shape[1]
        kb = np.argmax(band, axis=1)
        r_ = np.arange(k)
        db = 10 * np.log10(band[r_[:, None], _clip_int(kb[:, None] + np.arange(-1, 2), 0, nbb - 1)]
                           + 1e-30)
        # tonality: peak over the median of the neighbourhood (+-25 % in frequency)
        # (per click, so that the result does not depend on which clicks are
        # measured together: outside its own half-width, equal numbers of -inf
        # and +inf leave the median of the 2H + 1 values unchanged)
        half = np.maximum(4, (0.25 * (lo_b + kb)).astype(np.int64))
        big = int(half.max()) if k else 4
        offs = np.arange(-big, big + 1)[None, :]
        nbh = _clip_int(kb[:, None] + offs, 0, nbb - 1)
        local = band[r_[:, None], nbh]
        local = np.where(offs < -half[:, None], -np.inf,
                         np.where(offs > half[:, None], np.inf, local))
        medp = np.partition(local, big, axis=1)[:, big]
        tonality = db[:, 1] - 10 * np.log10(medp + 1e-30)
        # ring-to-noise: the same bins before the onset
        kk = lo_b + kb
        win = kk[:, None] + np.arange(-3, 4)[None, :]
        sw, pw = spec[r_[:, None], win], pspec[r_[:, None], win]
        ring_snr = 10 * np.log10(((sw.real ** 2 + sw.imag ** 2).sum(axis=1) + 1e-30)
                                 / ((pw.real ** 2 + pw.imag ** 2).sum(axis=1) + 1e-30))
        # ring-to-noise on the first 6 ms only (for the second look): short,
        # bright clicks (a two-click engine's second click) have little left
        # after that; only where the full-length tests fail
        ring_snr_s = np.full(k, 99.0)
        need = np.nonzero((tonality < self.min_tonality_db)
                          | (ring_snr < self.min_ring_snr_db))[0]
        if need.size:
            ms = int(0.006 * fs)
            ns = self._nfft_short
            tp = self._taper(ms)
            sh = sp_fft.rfft(tail[need, :ms] * tp, n=ns, axis=1)
            lo_s, hi_s = self._short_bins
            shp = (sh.real ** 2 + sh.imag ** 2)[:, lo_s:hi_s]
            shpre = sp_fft.rfft(pre[need, m - ms:] * tp[::-1], n=ns, axis=1)
            shpp = (shpre.real ** 2 + shpre.imag ** 2)[:, lo_s:hi_s]
            kbs = np.argmax(shp, axis=1)
            rn = np.arange(need.size)[:, None]
            ws = _clip_int(kbs[:, None] + np.arange(-1, 2)[None, :], 0, shp.shape[1] - 1)
            ring_snr_s[need] = 10 * np.log10((shp[rn, ws].sum(axis=1) + 1e-30)
                                             / (shpp[rn, ws].sum(axis=1) + 1e-30))
        # quadratic interpolation of the log magnitude (Smith & Serra 1987)
        al, be, ga = db[:, 0], db[:, 1], db[:, 2]
        den = al - 2 * be + ga
        inner = (kb > 0) & (kb < nbb - 1)
        delta = np.where(inner & (den < 0), 0.5 * (al - ga) / np.where(den < 0, den, -1.0), 0.0)
        ring = np.where(inner, (kk + delta) * fs / self._nfft_ring, np.nan)
        # attack and decay on the ring's own envelope: complex demodulation at
        # the ring frequency averaged over short blocks (a narrow-band
        # envelope, far less noisy than the broadband one)
        attack = np.ones(k)
        decay: list[float | None] = [None] * k
        # (only where the cheap tests leave a chance: a clear ring standing
        # above the noise)
        have = np.isfinite(ring) & (((tonality >= self.min_tonality_db)
                                     & (ring_snr >= self.min_ring_snr_db))
                                    | (ring_snr_s >= self.min_ring_snr_db - 2.0))
        if have.any():
            sel_rows = np.nonzero(have)[0]
            w = (-2j * math.pi * ring[sel_rows] / fs)[:, None]
            blk = max(1, round(0.0005 * fs))
            blk2 = 2 * blk
            # exp(-i w n) over the longer blocks; its first blk columns serve the
            # shorter ones
            phasor = np.exp(w * np.arange(blk2)[None, :]).astype(np.complex64)
            phasors = {blk2: phasor, blk: np.ascontiguousarray(phasor[:, :blk])}

            def block_env(sig: np.ndarray, blk: int) -> np.ndarray:
                # |mean over each block of sig * exp(-i w n)|: the phase that
                # carries over from block to block has modulus one, so one
                # block-long phasor serves every block
                nbk = sig.shape[1] // blk
                xb = sig[:, :nbk * blk].reshape(sig.shape[0], nbk, blk)
                return np.abs(np.einsum("kjb,kb->kj", xb, phasors[blk])) / blk

            nab = 20
            first = _rows(y, on[sel_rows], nab * blk)
            env = block_env(first, blk)
            attack = np.ones(k)
            attack[sel_rows] = (np.argmax(env >= 0.7 * env.max(axis=1, keepdims=True), axis=1)
                                * blk / fs)
            nb = m // blk2
            env_t = block_env(tail[sel_rows], blk2)
            npb = self._pre // blk2
            pre_d = _rows(y, on[sel_rows] - gap - npb * blk2, npb * blk2)
            env_p = block_env(pre_d, blk2)
            env_db = 20 * np.log10(env_t + 1e-12)
            floor_db = 10 * np.log10(np.mean(env_p ** 2, axis=1) + 1e-24) + 6.0
            # straight line through the tail's level in dB, from its peak block
            # to the first block under the noise floor + 6 dB (least squares)
            j = np.arange(nb)[None, :]
            k0 = np.argmax(env_db, axis=1)[:, None]
            below = (env_db < floor_db[:, None]) & (j >= k0)
            stop = np.where(below.any(axis=1), np.argmax(below, axis=1), nb)[:, None]
            use = (j >= k0) & (j < stop)
            cnt = use.sum(axis=1)
            tt = j * (blk2 / fs)
            mt = (tt * use).sum(axis=1) / np.maximum(cnt, 1)
            my = (env_db * use).sum(axis=1) / np.maximum(cnt, 1)
            dt = (tt - mt[:, None]) * use
            sxx = (dt * dt).sum(axis=1)
            sxy = (dt * (env_db - my[:, None])).sum(axis=1)
            slope = np.where(sxx > 0, sxy / np.where(sxx > 0, sxx, 1.0), 0.0)
            fit = np.nonzero((cnt >= 3) & (slope < 0))[0]
            for i, d_s in zip(sel_rows[fit].tolist(), (-_DB_PER_NEPER / slope[fit]).tolist()):
                decay[i] = d_s
        return {"level_dbfs": level, "ring_hz": [r if math.isfinite(r) else None
                                                 for r in ring.tolist()],
                "decay_s": decay, "attack_s": attack, "tonality_db": tonality,
                "ring_snr_db": ring_snr, "ring_snr_short_db": ring_snr_s}

    def _taper(self, m: int) -> np.ndarray:
        """Flat, then the right half of a Hann window over the last half (cached)."""
        t = self._tapers.get(m)
        if t is None:
            t = np.ones(m, dtype=np.float32)
            ht = m // 2
            if ht:
                t[m - ht:] = np.hanning(2 * ht)[ht:]
            self._tapers[m] = t
        return t

    def _hp_corner(self) -> float:
        """Lowest frequency (Hz) the refinement stream keeps: the high-pass corner."""
        return float(self._hp_hz)


def _whole_cycles(mains: np.ndarray, fs: float) -> tuple[np.ndarray, np.ndarray]:
    """The whole cycles between sorted main-click onsets: their starts and lengths.

    An interval of about one local period (within 15 % of the median of the
    9 intervals around it), or of two with the main click between them
    missed (split at its middle); an interval a second click splits is left
    out, and so are lengths over 0.5 s or under 10 ms.  ``mains`` and the
    results are in samples at the rate ``fs`` (Hz); starts int64 in time
    order, lengths float64.
    """
    per = np.diff(mains).astype(np.float64)
    if per.size == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(0)
    med = _median9(per)
    kk = np.maximum(np.round(per / med), 1.0)
    ok = ((np.abs(per / (kk * med) - 1.0) <= 0.15) & (kk <= 2) & (per / kk <= 0.5 * fs)
          & (per / kk >= 0.01 * fs))
    two = ok & (kk == 2)
    st = np.concatenate([mains[:-1][ok], np.round(mains[:-1] + per / 2)[two]])
    T = np.concatenate([(per / kk)[ok], (per / 2)[two]])
    order = np.argsort(st, kind="stable")
    return st[order].astype(np.int64), T[order]


def _with_neighbours(sel: np.ndarray) -> np.ndarray:
    """A 1-D mask with each True's neighbours set too, circularly (the last bin neighbours the first).

    The same as ``sel | np.roll(sel, 1) | np.roll(sel, -1)``, without np.roll's
    overhead on these short masks.
    """
    out = sel.copy()
    if sel.size:
        out[1:] |= sel[:-1]
        out[:-1] |= sel[1:]
        out[0] |= sel[-1]
        out[-1] |= sel[0]
    return out


def _aic_split_rows(aw: np.ndarray) -> np.ndarray:
    """Per row, the sample that best splits it into two stationary segments.

    Akaike-information-criterion change point (Maeda 1985; the two-segment
    form of Sleeman & van Eck, PEPI 1999) computed with cumulative sums;
    returns the length of the first segment (2 .. n - 4).  The criterion is
    evaluated only where the minimum is searched, in float64, each step in
    place; the same split, to the sample, as the direct form on the whole
    row (the tests hold that form).
    """
    n = aw.shape[1]
    c1 = np.cumsum(aw, axis=1)
    sq = aw * aw
    c2 = np.cumsum(sq, axis=1, out=sq)
    kk = np.arange(2, n - 3, dtype=np.float64)  # length of the first segment
    nk = n - kk
    s1, q1 = c1[:, 1:n - 4], c2[:, 1:n - 4]
    s2, q2 = c1[:, -1:] - s1, c2[:, -1:] - q1
    # (each step in place, in the order of
    # kk * log(max(q1 / kk - (s1 / kk) ** 2, 1e-30)) + (nk - 1) * log(...))
    aic = _log_var(q1, s1, kk)
    aic *= kk
    rest = _log_var(q2, s2, nk)
    rest *= nk - 1
    aic += rest
    return 2 + np.argmin(aic, axis=1)


def _log_var(q: np.ndarray, s: np.ndarray, n: np.ndarray) -> np.ndarray:
    """``np.log(np.maximum(q / n - (s / n) ** 2, 1e-30))`` (float64), the same steps in place."""
    m = np.divide(s, n)
    np.square(m, out=m)
    out = np.divide(q, n)
    out -= m
    np.maximum(out, 1e-30, out=out)
    return np.log(out, out=out)


class _TemplateScan:
    """Matched-filter pass with the recording's own clicks (internal to ClickDetector).

    **Templates.**  The first ``n_examples`` accepted clicks (decimated,
    ``length_s`` long from just before their onsets) are compared by
    normalised correlation (best over +-0.7 ms shifts); the group that
    correlates 0.5 or more with its most typical member is aligned on its
    average and averaged: the main template.  Clicks that later correlate
    under 0.55 with it (accepted ones, and rejected candidates with a clear
    onset and ring) are collected; once a group of 6 or more of them forms
    (the brighter, shorter second click of a two-click engine), and its
    average is not the main template again (correlation over 0.7) nor rings
    where the main click rings (within 8 %: the main click smeared by the
    room or by noise; that group is dropped), it gives a second template.  The
    second click's delay after its main click, as a fraction of the period
    before, is learnt from that group (median, when the interquartile range
    is 0.05 or less).  When no such group forms (second clicks too weak for
    the frame detector), the cycles are folded at fixed places in the
    stream (once the main template has scanned to 10 s, past the chunks it
    formed too late for, then every 5 s, at
    most 12 times, and no more once 200 cycles show no rise at all or a
    fold's template rings under 0.8 of the main click's ring: the room, not
    the diaphragm) and the template is made at the phase where their energy
    rises (:meth:`_fold_second`).

    **Scan.**  The decimated stream is correlated with each template (the
    matched filter, North 1943; Turin, "An introduction to matched filters",
    IRE Trans. IT-6, 1960), in fixed chunks of ``chunk_s``, by FFT in
    overlapping blocks (300 Hz to 0.45 x the decimated rate), and the
    envelope of the output (analytic signal, read exactly at every second
    sample: :meth:`_envelope`) is compared with a noise level: the larger of
    (a) the floor of each second of the chunk, the lower decile of the 10 ms
    medians of the envelope over that second and the chunk's margins,
    divided by its value on white Gaussian noise (computed once per
    template, fixed seed) -- robust to clicks filling most of the time --
    and (b) the median of the three 10 ms medians 20-50 ms earlier (speech
    or a splash raises it; bins within an accepted click's ring count as
    zero there); each over 1.1774, the median of a Rayleigh variable of unit
    scale (the envelope of Gaussian noise is Rayleigh).  A click is a peak
    ``threshold`` or more times that level, the largest within -5/+12 ms,
    rising 6 dB over the envelope just before the template's length, with
    no accepted click within 10 ms.  With the second click's delay known,
    the largest envelope peak within +-(1 ms + 3 % of the delay) of each
    expected second click counts at 3 times the floor alone if it stands no
    lower than the envelope 2-4 ms before it, so that it is not the falling
    shoulder of something earlier (a narrow search: few noise peaks compete;
    in a reverberant room the filter's response to the main click's echo
    still fills the 2-4 ms before).  The same bounded search, at equal steps
    across an interval of 2-6 periods between known main clicks, takes the
    main clicks the free scan missed (:meth:`_missed_mains`; in a
    reverberant room the reverberation of the clicks before raises the
    noise level, and in a run of cycles some main clicks stay just under
    the threshold).

    **Streaming.**  Chunks are fixed in the stream, each template is frozen
    the moment its last example is measured (set by the audio alone), and a
    chunk is scanned only once the accepted clicks around it are known, so
    the result does not depend on block sizes.  Without its template a chunk
    is kept while the template may still form in time for it (at most
    ``lookback_s`` before the accepted clicks' frontier), so the weak startup
    clicks before the templates formed are found too; a chunk ending more
    than ``lookback_s`` before the main template's last example is not
    scanned with it, however the audio was handed over.  Memory: at most about
    32 s of float32 at the decimated rate (3 MB at 24 kHz) and the clicks
    found.
    """

    def __init__(self, fs_in: float, q: int, fs_d: float, *, threshold: float = 5.0,
                 n_examples: int = 32, length_s: float = 0.012, chunk_s: float = 2.0,
                 lookback_s: float = 30.0) -> None:
        self.fs_in, self.q, self.fs_d = fs_in, q, fs_d
        self.threshold = threshold
        self.expect_threshold = 3.0
        self.K = n_examples
        self.L = round(length_s * fs_d)
        self.P = round(0.0005 * fs_d)
        self.A = round(0.0007 * fs_d)  # alignment search of the examples (+-)
        self.C = round(chunk_s * fs_d)
        self.E = round(0.020 * fs_d)  # look-back of a chunk's output (rise test)
        self.E2 = round(0.015 * fs_d)  # look-ahead (peak window)
        # the envelope is read at every R-th output sample (exactly: see _envelope)
        self.R = 2
        self.n_env = -(-(self.C + self.E + self.E2) // self.R)
        self.G = self.R * round(0.010 * fs_d / self.R)  # 10 ms statistics bins (decimated samples)
        # the floor's span: 1 s of the chunk (with its margins), so that a
        # quiet second does not lower the floor of a loud one
        self.S = round(1.0 * fs_d)
        self.lookback = round(lookback_s * fs_d)
        self.buf = np.zeros(0, dtype=np.float32)
        self.b0 = 0  # decimated index of buf[0]
        self.n = 0  # decimated samples fed
        self.onsets: list[int] = []  # accepted clicks' onsets (decimated index), sorted
        # rejected candidates with a click's quick attack and a ring (the
        # detector's second-look pool), sorted: in a reverberant room a main
        # click may ring too little above the room to be accepted at once
        self.quick: list[int] = []
        self.examples: list[np.ndarray] = []
        self.example_onsets: list[int] = []
        # second-family example onset -> its place in the cycle (_take_candidates)
        self._example_phase: dict[int, float | None] = {}
        self.phase: float | None = None  # second click's delay / the period before
        # the fold's median local period (decimated samples; set with the
        # folded template), and what the bounded searches found in cycles
        # far from it (see _vote_delay): [at the second click's place in the
        # cycle, at its fixed delay]
        self.phase_period: float | None = None
        self.delay_votes = [0, 0]
        self._is_main: dict[int, bool] = {}  # accepted onset -> like the main template
        # the same for onsets after the last ones asked, matched in advance (see
        # _mains), and the main template they were matched with
        self._main_ahead: dict[int, bool] = {}
        self._main_ahead_h: np.ndarray | None = None
        # per template slot: [a block's filter spectrum (conjugate, band-masked,
        # first M / 2 bins: see _envelope) or None, ring_hz, time-domain h,
        # next chunk, floor calibration, ring DFT basis]
        self.slots: list[list] = [[None, 0.0, None, 0, 1.0, None],
                                  [None, 0.0, None, 0, 1.0, None]]
        self.clicks: list[Click] = []
        self._candidates: list[tuple[int, np.ndarray]] = []  # second-family examples to take
        # per click found: how well its template fits it (normalised
        # correlation, 0-1), to choose between two templates' finds of one click
        self.click_fit: list[float] = []
        self.click_slot: list[int] = []  # which template found each click (0 main, 1 second)
        # per click found: whether only the search where the learnt place in
        # the cycle expects a second click found it (:meth:`_expected`)
        self.click_guided: list[bool] = []
        # per click found (by onset sample) while both templates exist: its ring
        # on the other family's grid, for a click the kinds pass gives to the
        # other family
        self.other_ring: dict[int, float | None] = {}
        # the onset (decimated) of the main template's last example: where in
        # the stream it formed (see advance)
        self._main_formed_at = 0
        self.main_found: list[int] = []  # onsets (decimated) the main template found
        # ... and those of them :meth:`_missed_mains` found
        self.filled_found: list[int] = []
        # the filter runs on overlapping blocks of M samples (overlap-save,
        # Oppenheim & Schafer, "Discrete-Time Signal Processing", 1989,
        # section 8.7.3): each gives V outputs, Q more on either side being
        # dropped (there the band mask's and the analytic signal's responses
        # wrap round the block)
        self.M = 4096
        self.Q = 256
        self.V = (self.M - (self.L - 1) - 2 * self.Q) // 2 * 2  # (even)
        self.nB = -(-(self.C + self.E + self.E2) // self.V)  # blocks per chunk
        f = np.arange(self.M // 2 + 1) * (fs_d / self.M)
        self.mask = ((f >= 300.0) & (f <= 0.45 * fs_d)).astype(np.float32)
        self._spec_key: int | None = None  # chunk whose block spectra are in _spec
        self._spec = np.zeros((0, self.M // 2), dtype=np.complex64)
        self._consts: dict[int, tuple] = {}  # see _scan_consts
        # second template by folding (see _fold_second): tried at fixed places
        # in the stream, so the result does not depend on block sizes
        self.fold_every = round(5.0 * fs_d)  # decimated samples between folds
        self.fold_tries = 12
        self.fold_window_s = 28.0
        self._next_fold = round(10.0 * fs_d)  # (at 10 s of stream, then every 5 s)
        self._folds = 0
        self.fold_info: dict = {}  # what the last fold saw (for diagnostics)
        self.folded = False  # the second template came from folding
        self._fold_sos = signal.butter(4, 500.0, "highpass", fs=fs_d, output="sos")
        top = 0.45 * fs_d
        self._fold_bands = [self._fold_sos] + [
            signal.butter(2, (f, min(2 * f, top)), "bandpass", fs=fs_d, output="sos")
            for f in (500.0, 1000.0, 2000.0, 4000.0) if 2 * f <= top * 1.5 and f < top]
        # the band energies the folds read: from the buffer once the main
        # template forms (no fold comes before it), then with each block fed,
        # until no fold is to come (see _start_bands)
        self._band_zi = [np.zeros((sos.shape[0], 2)) for sos in self._fold_bands]
        self._band_e: list[np.ndarray] | None = None

    @property
    def templates(self) -> list[float]:
        """Ring frequency (Hz) of each template formed so far."""
        return [s[1] for s in self.slots if s[0] is not None]

    def _first_chunk(self) -> int:
        """The first chunk (decimated start) the main template did not form too late for.

        A chunk waits for a template at most the look-back past its end, so
        a chunk starting before this one is given up as if the template had
        never formed (:meth:`advance`); chunks start at multiples of ``C``.
        """
        return max(0, -(-(self._main_formed_at - self.C - self.lookback) // self.C) * self.C)

    def feed(self, dec: np.ndarray) -> None:
        self.buf = np.concatenate([self.buf, dec])
        self.n += dec.size
        if self._band_e is not None:
            self._add_band_energies(dec)

    def _add_band_energies(self, dec: np.ndarray) -> None:
        """Append the fold bands' energies of ``dec`` (each filter's state carried on)."""
        if not dec.size:
            return  # (sosfilt refuses an empty block)
        for j, sos in enumerate(self._fold_bands):
            y, self._band_zi[j] = signal.sosfilt(sos, dec, zi=self._band_zi[j])
            self._band_e[j] = np.concatenate([self._band_e[j], (y * y).astype(np.float32)])

    def _start_bands(self) -> None:
        """Start the fold bands' energies, from the buffer's start, as the main template forms.

        Before it no fold comes, so a recording whose main template forms
        late (or never: noise, silence) is not filtered five times over
        meanwhile.  The filters start at rest at the buffer's start; a fold
        reads its energies from ``E + L`` (32 ms) later at the earliest.  The
        filters' slowest pole (the 500-1000 Hz band's) decays by e in 1.2 ms,
        so by then the start's transient has fallen under 3e-12 of its size,
        far under the float32 energies' precision (6e-8): the fold sees what
        filters run from the stream's start would have given.
        """
        self._band_e = [np.zeros(0, dtype=np.float32) for _ in self._fold_bands]
        self._add_band_energies(self.buf)

    def note_clicks(self, notes: list[tuple[int, bool]]) -> None:
        """Note the detector's clicks of one batch, in stream order.

        ``notes``: (onset in input samples, accepted) per click; not accepted
        are the rejected candidates with a click's quick attack and a ring.
        Until the main template forms, the accepted clicks' windows are its
        examples; then each click unlike it (normalised correlation under
        0.55 at every shift within +-``A``) is a candidate for the second
        family, until that forms.  The likeness of the batch's clicks is
        computed in one go (:meth:`_unlike_main`): the main template, made
        once, is the same for every click after it forms.
        """
        main, second = self.slots
        width = self.L + 2 * self.A
        after: list[tuple[int, np.ndarray]] = []  # (onset, window) after the main formed
        for onset_in, accepted in notes:
            od = round(onset_in / self.q)
            if accepted:
                self.onsets.append(od)
            else:
                self.quick.append(od)
                if main[0] is None:
                    continue
            if second[0] is not None:
                continue
            a = od - self.P - self.A - self.b0
            if a < 0 or a + width > self.buf.size:
                continue
            ex = self.buf[a:a + width].astype(np.float64)
            if main[0] is not None:
                after.append((od, ex))
                continue
            self.examples.append(ex)
            self.example_onsets.append(od)
            if len(self.examples) >= self.K:
                if self._make_template(main):
                    self._main_formed_at = od
                self.examples, self.example_onsets = [], []
        if after:
            unlike = self._unlike_main(np.array([ex for _, ex in after]))
            # (taken up in :meth:`advance`, in stream order with the folds)
            self._candidates.extend(item for item, u in zip(after, unlike.tolist()) if u)

    def _unlike_main(self, ex: np.ndarray) -> np.ndarray:
        """Whether each row of ``ex`` (``L + 2A`` samples) correlates under 0.55 with the main template.

        The normalised correlation at every shift, each row's mean removed
        (one mean over the row): the product with the template over the
        energy of the same ``L`` samples.
        """
        e = ex - ex.mean(axis=1, keepdims=True)
        win = _windows(e, self.L)  # (rows, shifts, L)
        num = win @ self.slots[0][2]
        energy = _windows(e * e, self.L).sum(axis=2)
        c = num / (np.sqrt(energy) + 1e-20)
        return np.abs(c).max(axis=1) < 0.55

    def _take_candidates(self, upto: int) -> None:
        """Second-family candidates before ``upto`` (decimated): a template try every 8.

        Each example's place in its cycle (:meth:`_learn_phase`) is read as it
        is taken, while the main clicks before it are surely kept: read when
        the template is tried, it would depend on how much of the stream is
        still kept then, which depends on how the audio was handed over.
        """
        second = self.slots[1]
        n_take = 0  # (in the order noted, up to the first at or past ``upto``)
        while n_take < len(self._candidates) and self._candidates[n_take][0] < upto:
            n_take += 1
        batch = self._candidates[:n_take]
        del self._candidates[:n_take]
        if batch and second[0] is None:
            ods = [od for od, _ in batch]
            self._example_phase.update(zip(ods, self._cycle_places(ods)))
        for od, ex in batch:
            if second[0] is not None:
                continue
            self.examples.append(ex)
            self.example_onsets.append(od)
            if len(self.examples) >= self.K // 2 and len(self.examples) % 8 == 0:
                if self._make_template(second):
                    self.examples, self.example_onsets = [], []
                elif len(self.examples) >= 2 * self.K:
                    self.examples = self.examples[self.K // 2:]
                    self.example_onsets = self.example_onsets[self.K // 2:]
        if len(self._example_phase) > 2 * len(self.example_onsets) + 64:  # (forget the gone)
            self._example_phase = {od: self._example_phase[od] for od in self.example_onsets
                                   if od in self._example_phase}

    def _make_template(self, slot: list) -> bool:
        A, L = self.A, self.L
        x = np.array(self.examples)
        x = x - x.mean(axis=1, keepdims=True)
        shifts = np.arange(-A, A + 1)
        win = np.lib.stride_tricks.sliding_window_view(x, L, axis=1)  # K x (2A+1) x L
        cs = np.concatenate([np.zeros((x.shape[0], 1)), np.cumsum(x * x, axis=1)], axis=1)
        norms = np.sqrt(np.maximum(cs[:, L:] - cs[:, :-L], 0.0))[:, :, None] + 1e-20
        cen = win[:, A] / norms[:, A]
        # similarity of two examples: their best correlation over shifts (every
        # other sample: 42 us at 24 kHz, a tenth of a period at 2.4 kHz)
        corr = (np.einsum("ksl,jl->kjs", win[:, ::2].astype(np.float32),
                          cen.astype(np.float32)) / norms[:, ::2, 0][:, None, :]).max(axis=2)
        corr = np.maximum(corr, corr.T)
        seed = int(np.argmax(corr.sum(axis=1)))
        fam = np.nonzero(corr[seed] >= 0.5)[0]
        if fam.size < (max(6, x.shape[0] // 4) if slot is self.slots[0] else 6):
            return False
        ref = cen[fam].mean(axis=0)
        best = np.full(fam.size, A)
        for _ in range(2):
            ref = ref / (np.linalg.norm(ref) + 1e-20)
            best = np.argmax(np.einsum("ksl,l->ks", win[fam], ref) / norms[fam, :, 0], axis=1)
            ref = np.mean(win[fam, best], axis=0)
        off = round(float(np.median(shifts[best])))
        h = np.mean(win[fam, np.clip(best - off, 0, 2 * A)], axis=0)
        h = h - h.mean()
        h = h / (np.linalg.norm(h) + 1e-20)
        other = self.slots[0][2]
        if (other is not None and slot is not self.slots[0]
                and float(np.max(np.abs(np.correlate(np.pad(other, A), h, "valid")))) > 0.7):
            return False  # the main click again
        if slot is self.slots[1] and self._rings_like_main(h):
            # rings where the main click rings (within 8 %), with another
            # waveform: the main click smeared by the room or by noise, not a
            # second click, whose modes ring apart; these examples go, so
            # that another family can form
            gone = set(fam.tolist())
            self.examples = [e for i, e in enumerate(self.examples) if i not in gone]
            self.example_onsets = [o for i, o in enumerate(self.example_onsets) if i not in gone]
            return False
        if slot is self.slots[1]:
            self.phase = self._learn_phase([self.example_onsets[i] for i in fam.tolist()])
            if self.phase is None and self._folds < 4:
                return False  # no place in the cycle: first let folding look (to 25 s)
        self._install(slot, h)
        return True

    def _rings_like_main(self, h: np.ndarray) -> bool:
        """Whether ``h``'s spectral peak lies within 8 % (in log) of the main template's.

        The peak on a grid of M points (6 Hz at 24 kHz) settles it unless it
        lies within 2 % of the bar; only then the fine peak of
        :meth:`_peak_hz` (0.1 Hz), which costs 50 times as much, is taken.
        (The coarse grid samples the same spectrum: its peak is within one
        of its steps of the fine one, under 2 % of any ring in the band,
        from 300 Hz.)
        """
        main_hz = self.slots[0][1]
        d = abs(math.log(self._peak_hz(h, n=self.M) / main_hz))
        if abs(d - 0.08) < 0.02:
            d = abs(math.log(self._peak_hz(h) / main_hz))
        return d < 0.08

    def second_rings_like_main(self) -> bool:
        """Whether the second template rings within 3 % of the main one (False without one).

        A fold finds a strong reflection of each click in the room (a wall a
        few metres off: a fixed delay, so at a steady rate a fixed place in
        the cycle) as it would a second click, and its template keeps the
        click's spectrum; a diaphragm's second click, a snap of its own,
        rings at its own mix of the plate's modes.  (On the generator's
        recordings, 432 of them: the 185 second templates of two-click
        engines ring 4.7 % or more from the main one, 96 % of them at 1.8-2.3
        times its frequency; the templates two reverberant rooms gave a
        one-click engine, in three runs, 0.8-1.8 % from it.)  The same 3 % as
        :func:`_quieter_rings_like_louder`.
        """
        main, second = self.slots
        if main[0] is None or second[0] is None:
            return False
        return abs(math.log(second[1] / main[1])) < _SAME_RING_LOG

    def _peak_hz(self, h: np.ndarray, *, n: int = 2 ** 18) -> float:
        """Frequency (Hz) of the largest spectral peak of ``h`` within the band mask,
        on a grid of ``n`` points (the default: to 0.1 Hz at 24 kHz)."""
        spec = np.abs(sp_fft.rfft(h, n=n))
        fr = np.arange(spec.size) * (self.fs_d / n)
        spec[(fr < 300.0) | (fr > 0.45 * self.fs_d)] = 0.0
        return float(fr[int(np.argmax(spec))])

    def _install(self, slot: list, h: np.ndarray, *, ring_hz: float | None = None) -> None:
        """Make ``h`` (zero mean, unit norm, onset ``P`` samples in) the template of ``slot``.

        ``ring_hz``: its :meth:`_peak_hz` when the caller has it already.
        """
        # (the conjugate spectrum of a block with the band mask folded in,
        # below half the rate only: see _envelope)
        slot[0] = (np.conj(sp_fft.rfft(h, n=self.M)).astype(np.complex64)
                   * self.mask)[:self.M // 2]
        slot[1] = self._peak_hz(h) if ring_hz is None else ring_hz
        slot[2] = h
        if slot is self.slots[0]:  # (made once: see note_clicks)
            self._start_bands()
        # the floor estimator's value on noise alone, relative to the median
        # (white Gaussian noise, fixed seed: the same on every run)
        noise = np.random.default_rng(12345).standard_normal(
            self.C + self.E + self.E2 + self.L - 1).astype(np.float32)
        slot[4] = 1.0
        env = self._envelope(noise, slot[0])
        env = env[:-(-(self.S + self.E + self.E2) // self.R)]  # (one floor span)
        slot[4] = float(np.percentile(self._bin_medians(env), 10)) / float(np.median(env))

    def _fold_second(self, upto: int) -> bool:
        """Find a second click too weak for the frame detector by folding the cycles.

        Synchronous averaging, or epoch folding (Leahy et al., ApJ 266, 1983;
        Braun, Mech. Syst. Signal Process. 25, 2011; both from memory).  The
        cycles are the intervals between accepted clicks of up to the last
        28 s that last about one local period (within 15 % of the median of
        the 9 around), or about two with the main click between them missed
        (split at the middle); an interval a second click splits is left out,
        and nothing is folded when the intervals alternate short and long
        (the frame detector already takes the second clicks: the examples
        make that template).  The clicks are those accepted and those the
        main template's free scan found; from the fifth fold on, when they
        leave fewer than ``_FOLD_FEW_CYCLES`` such cycles, the main clicks
        :meth:`_missed_mains` found between them too (in a reverberant room
        at a low click-to-noise ratio the free scan misses so many main
        clicks that most intervals span three periods or more, and the fold
        never gathers the cycles it needs).  The band energy of each cycle
        (the whole band above 500 Hz, and its octaves from 500 Hz) is cut into 70 bins of
        phase from 0.1 to 0.8 of the local period (to 0.8 only, so that the
        next main click of a short cycle never folds in), each cycle divided
        by its own median, and the cycles averaged.  Noise averages flat; a
        click at a fixed fraction of the period adds up.  A second click is
        there when, in some band, one bin rises 1.15 times or more over the
        largest of the 2-5 bins before it, by 6 or more standard errors (the
        cycle-to-cycle scatter over the square root of the number of cycles),
        and by three times as many standard errors as any rise more than 4 bins
        away; the band where it rises most is used.  (A room's echo of the
        main click folds, at a steady rate, into many rises of like size, the
        random fine structure of the reverberation; a second click is one
        rise well above the rest.  In a reverberant room or deep in noise the
        second click may stand out only in the octave where it rings.)

        Its template is the average of the windows at that phase, each
        aligned first on the peak of its 1 ms envelope at the ring frequency
        found there (the mean power spectrum over that of the window before),
        then three times on the average by correlation (within +-0.7 ms), and
        cut from ``P`` before the average's onset (its sharpest energy rise
        where the phase lies within the bins that rose -- a room's reflection
        of the main click just before may rise more sharply -- refined by the
        AIC change point), weighted by the click's share of the power at each
        frequency (:func:`_click_share_filtered`).  When it still rings where
        the main click rings (within 8 %) while the power at the phase rose
        most at a frequency more than 8 % from both, inside the band searched
        -- in a reverberant room the main click's reverberation fills the
        window; a second click differs in timbre, ringing most at another of
        the plate's modes -- only the octave about that frequency is kept
        (:func:`_octave_about`).  The phase is the median delay of
        the aligned examples over the local period.  The template is kept
        when:

        * the even and the odd cycles, each aligned on their own average,
          give the same waveform (correlation 0.5 or more): a click, not
          noise the alignment locked on;
        * the average's energy rises 5 dB or more within 0.5 ms at the onset
          (over the 2 ms before): a click starts abruptly;
        * it is not the main click again (correlation 0.95 or less);
        * the phase lies within the bins that rose (or the next one: the
          refinement may move the onset up to 1 ms past the rise).

        Returns True when the second template and the second click's phase
        were set.  ``upto`` (decimated) is where the main template has
        scanned to; only the clicks and audio before it are used, and folds
        run at fixed places in the stream (every 5 s from 10 s, at most 12
        times), so the result does not depend on block sizes.
        """
        fs = self.fs_d
        # the earliest audio a fold reads is the same however the audio came:
        # what a stream still keeps as the main template forms.  The chunks
        # its last example came too late for (see advance) have been given
        # up by then, their audio dropped, from E + P + C before the first
        # chunk kept; given the whole array at once, more is kept, which a
        # fold must not read.  (From E + L past where the stream's audio
        # starts: the fold bands' filters start there, see _start_bands.)
        lo = max(self.b0 + self.E + self.L, self._first_chunk() - self.P - self.C + self.L,
                 upto - round(self.fold_window_s * fs))
        # every accepted click (in noise a main click's correlation with the
        # template is too uncertain to sort them) and every click the main
        # template's free scan found: the whole cycles between them leave out
        # the intervals a second click splits.  From the fifth fold on, when those
        # leave fewer than _FOLD_FEW_CYCLES whole cycles, the main clicks found
        # between known ones join them (:meth:`_missed_mains`)
        mains = self._all_clicks(lo, upto, upto)
        st, T = _whole_cycles(mains, fs)
        if self._folds > 4 and st.size < _FOLD_FEW_CYCLES:
            mains = self._all_clicks(lo, upto, upto, filled=True)
            st, T = _whole_cycles(mains, fs)
        self.fold_info = {"cycles": 0}
        if mains.size < 33:
            return False
        per = np.diff(mains).astype(np.float64)
        # the frame detector already takes most second clicks (intervals
        # alternate short and long): the examples make that template, and a
        # fold would only fold half cycles
        if _alternation(np.log(per)[:, None]) < -0.5:
            return False
        n = int(st.size)
        self.fold_info["cycles"] = n
        if n < 64:
            return False
        loc_t = _median9(T)  # the local period of each cycle
        # (to 0.8 only: a cycle kept may be 15 % shorter than the local
        # period, and the next main click must not fold in)
        nb = 70
        fr = 0.1 + 0.7 * np.arange(nb + 1) / nb
        # the band energies folded: from the first cycle's start to the last
        # bin edge (the edges as fold() places them, from that start).  A
        # cycle's bins may reach past the last click, its local period (the
        # median of 9) being longer than the cycle; the audio is there up to
        # the template's length and the scan's look-ahead past ``upto`` (what
        # a chunk's scan waits for), or to the stream's end on flushing,
        # where the last fold may come within a cycle of it.  Cycles reaching
        # further are left out: the same cycles whatever the block sizes.
        a0 = int(st[0]) - self.b0
        a1 = a0
        if self._band_e:
            last = np.round((st - st[0]) + loc_t * fr[-1]).astype(np.int64)
            fits = last <= min(upto + self.E2 + self.L, self.n) - self.b0 - a0
            if not fits.all():
                st, T, loc_t, last = st[fits], T[fits], loc_t[fits], last[fits]
                n = int(st.size)
                self.fold_info["cycles"] = n
                if n < 64:
                    return False
            a1 = a0 + int(last.max())
        k = np.arange(6, nb)
        ref_i = k[:, None] - np.arange(2, 6)[None, :]

        def fold(c: np.ndarray, scale: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
            # the energy whose running sum is c, in bins at the fractions fr
            # of ``scale`` after each cycle's start; the rise's z and ratio per bin k
            edges = np.round((st - st[0])[:, None] + scale[:, None] * fr[None, :]).astype(np.int64)
            e = np.diff(c[edges], axis=1) / np.maximum(np.diff(edges, axis=1), 1)
            e = e / (np.median(e, axis=1, keepdims=True) + 1e-30)
            prof = e.mean(axis=0)
            se = e.std(axis=0, ddof=1) / math.sqrt(n)
            jr = np.argmax(prof[ref_i], axis=1)
            ref = prof[ref_i][np.arange(k.size), jr]
            ref_se = se[ref_i[np.arange(k.size), jr]]
            z = (prof[k] - ref) / np.sqrt(se[k] ** 2 + ref_se ** 2 + 1e-30)
            # (a reference of exactly zero: digital silence in those bins of
            # every cycle, a gated recording or a dropout; a rise out of it is
            # infinite and counts, none is NaN and does not -- quietly)
            with np.errstate(divide="ignore", invalid="ignore"):
                return z, prof[k] / ref

        # the whole band, and octaves of it: in a reverberant room or deep in
        # noise the second click may stand out only where it rings and the
        # main click's echo does not
        top = None
        z_top = 0.0
        for e_band in self._band_e or []:
            z, ratio = fold(np.concatenate([[0.0], np.cumsum(e_band[a0:a1], dtype=np.float64)]),
                            loc_t)
            z_top = max(z_top, float(z.max()))
            good = (ratio >= 1.15) & (z >= 6.0)
            if not good.any():
                continue
            ib = int(np.argmax(np.where(good, z, -np.inf)))
            # one rise that stands out: a room's echo of the main click folds
            # into many rises of like size (the random fine structure of the
            # reverberation); a second click is one rise well above the rest
            rest = np.abs(np.arange(k.size) - ib) > 4
            z_rest = float(z[rest].max()) if rest.any() else 0.0
            if z[ib] >= 3.0 * max(z_rest, 1.0) and (top is None or z[ib] > top[0]):
                top = (float(z[ib]), ib, float(ratio[ib]), z_rest)
        self.fold_info["z_top"] = z_top
        if top is None:
            if n >= 200 and z_top < 3.0:
                # 200 cycles and not even a hint of a rise anywhere: a
                # one-click engine; no more folds (they cost time)
                self._folds = self.fold_tries
            return False
        self.fold_info.update(z=top[0], ratio=top[2], z_rest=top[3])
        ib = top[1]
        kb = int(k[ib])
        # the rise lies within the bin before the one that rose most, or in it
        # (the delay follows the local period, the median of 9, rather than
        # one cycle's: less scatter from the timing of single main clicks)
        delay = (fr[kb - 1] + 0.5 * (fr[kb] - fr[kb - 1])) * loc_t
        W = int(np.max(np.round(0.001 * fs + 0.03 * delay + (fr[1] - fr[0]) * T)))
        P, A, L = self.P, self.A, self.L
        m = 2 * W + round(0.004 * fs)  # the search window and 4 ms more
        pre = m + round(0.004 * fs)
        span = pre + 2 * W + 2 * L + 2 * A
        starts = st + np.round(delay).astype(np.int64) - W - pre - self.b0
        keep = (starts >= 0) & (starts + span <= self.buf.size)
        starts, st_k, loc_k = starts[keep], st[keep], loc_t[keep]
        if starts.size < 64:
            return False
        X = self.buf[starts[:, None] + np.arange(span)[None, :]].astype(np.float64)
        X = signal.sosfilt(self._fold_sos, X, axis=1)
        K = X.shape[0]
        rows = np.arange(K)
        # the ring frequency: mean power spectrum over the window there, over
        # that of the same length before it
        sp_on = np.mean(np.abs(sp_fft.rfft(X[:, pre:pre + m], axis=1)) ** 2, axis=0)
        sp_off = np.mean(np.abs(sp_fft.rfft(X[:, pre - m:pre], axis=1)) ** 2, axis=0) + 1e-30
        f = np.arange(sp_on.size) * fs / m
        band = (f >= 500.0) & (f <= 0.45 * fs)
        f2 = float(f[band][int(np.argmax((sp_on / sp_off)[band]))])
        # first alignment: the peak of the 1 ms narrow-band envelope at f2
        nav = max(4, round(0.001 * fs))
        ph = np.exp(-2j * math.pi * f2 / fs * np.arange(span))
        cs = np.cumsum(X * ph[None, :], axis=1)
        envb = np.abs(cs[:, nav:] - cs[:, :-nav])  # column j: samples j+1 .. j+nav
        pk = pre + np.argmax(envb[:, pre:pre + 2 * W], axis=1)
        g0 = pk - P - A
        ex = X[rows[:, None], g0[:, None] + np.arange(L + 2 * A)[None, :]]
        win = np.lib.stride_tricks.sliding_window_view(ex, L, axis=1)  # K x (2A+1) x L
        cs2 = np.concatenate([np.zeros((K, 1)), np.cumsum(ex * ex, axis=1)], axis=1)
        norms = np.sqrt(np.maximum(cs2[:, L:] - cs2[:, :-L], 0.0)) + 1e-20

        def align(sel: np.ndarray) -> np.ndarray:
            # three times by correlation with the group's own average (shifts 0..2A)
            ref_w = win[sel, A].mean(axis=0)
            best = np.full(sel.size, A)
            for _ in range(3):
                ref_w = ref_w / (np.linalg.norm(ref_w) + 1e-20)
                best = np.argmax(np.einsum("ksl,l->ks", win[sel], ref_w) / norms[sel], axis=1)
                ref_w = np.mean(win[sel, best], axis=0)
            return best

        best = align(rows)
        # a click, not noise the alignment has locked on: the even and the odd
        # cycles, aligned each on their own average, give the same waveform
        halves = []
        for sel in (rows[0::2], rows[1::2]):
            b = align(sel)
            halves.append(np.mean(win[sel, b], axis=0))
        ha = halves[0] - halves[0].mean()
        hb = halves[1] - halves[1].mean()
        agree = float(np.max(np.correlate(np.pad(ha, A), hb, "valid"))
                      / (np.linalg.norm(ha) * np.linalg.norm(hb) + 1e-30))
        g = g0 + best
        # the onset within the average (the envelope may peak on a room
        # reflection, well after it): the sharpest energy rise (0.5 ms after
        # over the 2 ms before, 0.5 ms apart) over the window and what lies
        # before it, then the AIC change point (Maeda 1985) within 1.5 ms
        # before and 1 ms after that rise
        q = int(np.min(g))
        wide = X[rows[:, None], (g - q)[:, None] + np.arange(q + L // 2)[None, :]].mean(axis=0)
        ce = np.concatenate([[0.0], np.cumsum(wide * wide)])
        s5, s20 = round(0.0005 * fs), round(0.002 * fs)
        # (where the phase lies within the bins that rose: wide[j] is, in
        # cycle k, off_k + j samples after the main click; a reflection of the
        # main click before the second click may rise more sharply)
        off = float(np.median(starts + self.b0 + g - q - st_k))
        med_loc = float(np.median(loc_k))
        j_lo = max(s20 + s5, math.ceil(fr[kb - 2] * med_loc - off))
        j_hi = min(wide.size - s5, math.floor(fr[min(kb + 1, nb)] * med_loc - off) + 1)
        if j_hi <= j_lo:
            return False
        t = np.arange(j_lo, j_hi)
        rise = (ce[t + s5] - ce[t]) / s5 / ((ce[t - s5] - ce[t - s5 - s20]) / s20 + 1e-30)
        tr = int(t[int(np.argmax(rise))])
        sharp = float(10 * np.log10(rise.max() + 1e-30))
        a_, b_ = max(tr - round(0.0015 * fs), 0), min(tr + round(0.001 * fs), wide.size)
        on_col = g - q + a_ + int(_aic_split_rows(wide[None, a_:b_])[0])
        cut = X[rows[:, None], (on_col - P)[:, None] + np.arange(L)[None, :]]
        h = cut.mean(axis=0)
        h = h - h.mean()
        h = h / (np.linalg.norm(h) + 1e-20)
        main_h = self.slots[0][2]
        like_main = float(np.max(np.abs(np.correlate(np.pad(main_h, A), h, "valid"))))
        # the second click's place: the median delay of the aligned examples
        # over the local period; it must lie within the bins that rose (in
        # noise single examples scatter, the average does not)
        phase = float(np.median((starts + self.b0 + on_col - st_k) / loc_k))
        # (the onset refinement may move it up to 1 ms past the rise: one bin more)
        consistent = fr[kb - 2] <= phase <= fr[min(kb + 2, nb)]
        self.fold_info.update(agree=agree, like_main=like_main, ring_hz=f2, sharp=sharp,
                              phase=phase, kb=kb)
        if agree < 0.5 or like_main > 0.95 or not consistent or sharp < 5.0:
            return False
        h = _click_share_filtered(h, fs, f, sp_on, sp_off)
        # a template that still rings where the main click rings, while the
        # power at the phase rose most elsewhere (at f2, more than 8 % from
        # both, and not at the edge of the band searched): the main click's
        # reverberation still fills it; only the octave about f2 is kept
        f_lo, f_hi = float(f[band][0]), float(f[band][-1])
        peak_hz = self._peak_hz(h)
        if (f_lo < f2 < f_hi and abs(math.log(f2 / self.slots[0][1])) >= 0.08
                and self._rings_like_main(h) and abs(math.log(f2 / peak_hz)) >= 0.08):
            h = _octave_about(h, fs, f2)
            peak_hz = self._peak_hz(h)
            self.fold_info["narrowed_to_hz"] = f2
        # nothing of the diaphragm rings below its lowest mode, and the main
        # click rings there or above: a template ringing under 0.8 of the
        # main click's ring (as made, or narrowed to the octave where the
        # power rose) is the room or the tank answering each click, not a
        # second click.  Later folds of the same room find the same, so none
        # is tried again.  (A clamped circle's modes lie at 1, 2.08, 3.41 ...
        # times its lowest: Leissa, NASA SP-160, Table 2.1.)
        if peak_hz < 0.8 * self.slots[0][1]:
            self.fold_info["refused_below_main_hz"] = peak_hz
            self._folds = self.fold_tries
            return False
        self.phase = phase
        self.phase_period = med_loc
        self.folded = True
        self._install(self.slots[1], h, ring_hz=peak_hz)
        return True

    def _all_clicks(self, lo: int, hi: int, hi_found: int, *, filled: bool = False
                    ) -> np.ndarray:
        """Accepted onsets in [lo, hi) and the main template's finds in [lo, hi_found), sorted.

        With ``filled``, the finds of :meth:`_missed_mains` too (the folds
        read them only when the free scan's finds leave too few cycles).
        """
        parts = [_between(self.onsets, lo, hi), _between(self.main_found, lo, hi_found)]
        if filled:
            parts.append(_between(self.filled_found, lo, hi_found))
        return np.sort(np.concatenate(parts))

    def _mains(self, lo: int, hi: int) -> np.ndarray:
        """Accepted onsets in [lo, hi) (decimated) that match the main template."""
        i0, i1 = bisect.bisect_left(self.onsets, lo), bisect.bisect_left(self.onsets, hi)
        known = self._is_main
        todo = [o for o in self.onsets[i0:i1] if o not in known]
        if todo:
            # the later onsets whose audio is already kept are matched in the
            # same batch and set aside (one batch per block of audio instead
            # of one per chunk); an answer set aside counts only while the
            # click's audio is still kept, where matching it again would give
            # it (the main template does not change), and ``known`` fills and
            # forgets exactly as without them
            ahead = self._main_ahead
            if self._main_ahead_h is not self.slots[0][2] or len(ahead) > 4096:
                ahead.clear()
                self._main_ahead_h = self.slots[0][2]
            kept_lo = self.b0 + self.P + self.A  # onsets whose audio is kept (see _match_main)
            kept_hi = self.b0 + self.buf.size - self.L - self.A + self.P
            got: dict[int, bool] = {}
            calc = []
            for o in todo:
                m = ahead.pop(o, None)
                if m is not None and kept_lo <= o <= kept_hi:
                    got[o] = m
                else:
                    calc.append(o)
            if calc:
                i2 = bisect.bisect_right(self.onsets, kept_hi)
                later = [o for o in self.onsets[i1:i2] if o not in ahead and o not in known]
                res = self._match_main(np.array(calc + later, dtype=np.int64))
                for o, m in zip(calc, res):
                    if m is not None:  # (None: no audio kept there; not cached)
                        got[o] = m
                for o, m in zip(later, res[len(calc):]):
                    if m is not None:
                        ahead[o] = m
            for o in todo:
                if o in got:
                    known[o] = got[o]
            if len(known) > 4096:  # forget the oldest
                for o in sorted(known)[:2048]:
                    del known[o]
        return np.array([o for o in self.onsets[i0:i1] if known.get(o, False)],
                        dtype=np.int64)

    def _match_main(self, on: np.ndarray) -> list[bool | None]:
        """Whether the clicks at these onsets correlate 0.55 or more with the main template."""
        out: list[bool | None] = [None] * on.size
        st = on - self.P - self.A - self.b0
        ok = np.nonzero((st >= 0) & (st + self.L + 2 * self.A <= self.buf.size))[0]
        if ok.size == 0:
            return out
        w = self.buf[st[ok][:, None] + np.arange(self.L + 2 * self.A)[None, :]]
        # every other shift (as for the templates); the template has zero mean,
        # so the windows' own means do not change the products
        L = self.L
        win = _windows(w, L)[:, ::2]
        w64 = w.astype(np.float64)
        cs = np.zeros((w.shape[0], w.shape[1] + 1))
        np.cumsum(w64, axis=1, out=cs[:, 1:])
        cs2 = np.zeros_like(cs)
        np.cumsum(w64 ** 2, axis=1, out=cs2[:, 1:])
        ssum = (cs[:, L:] - cs[:, :-L])[:, ::2]
        ssq = (cs2[:, L:] - cs2[:, :-L])[:, ::2]
        norm = np.sqrt(np.maximum(ssq - ssum * ssum / L, 0.0)) + 1e-20
        c = np.einsum("ksl,l->ks", win, self.slots[0][2].astype(np.float32)) / norm
        for i, m in zip(ok.tolist(), (np.abs(c).max(axis=1) >= 0.55).tolist()):
            out[i] = m
        return out

    def _peaks(self, on: np.ndarray) -> np.ndarray:
        """Largest absolute sample within 5 ms of these onsets (decimated), of the samples kept."""
        n5 = round(0.005 * self.fs_d)
        d0 = np.asarray(on, dtype=np.int64) - self.b0
        peaks = np.zeros(d0.size, dtype=np.float32)
        inner = (d0 >= 0) & (d0 + n5 <= self.buf.size)
        if inner.any():
            peaks[inner] = np.abs(_rows(self.buf, d0[inner], n5)).max(axis=1)
        for j in np.flatnonzero(~inner).tolist():  # (at the buffer's ends)
            raw = self.buf[max(d0[j], 0):max(d0[j] + n5, 0)]
            peaks[j] = np.max(np.abs(raw)) if raw.size else 0.0
        return peaks

    def _cycle_places(self, onsets: list[int]) -> list[float | None]:
        """Each onset's place in its cycle (decimated onsets; None where unknown).

        The place is the delay after the main click before the onset over
        the period before that click, from the main clicks (:meth:`_mains`)
        from 1 s before the first onset; None where there are not two of them
        before the onset or that period is over 0.5 s.
        """
        mains = self._mains(min(onsets) - round(1.0 * self.fs_d), max(onsets))
        out: list[float | None] = []
        for od in onsets:
            j = int(np.searchsorted(mains, od)) - 1
            period = mains[j] - mains[j - 1] if j >= 1 else 0
            out.append(float((od - mains[j]) / period) if 0 < period <= 0.5 * self.fs_d
                       else None)
        return out

    def _learn_phase(self, onsets: list[int]) -> float | None:
        """Delay of the second clicks after the main click / the period before it.

        From the second family's examples (their places in the cycle, read as
        they were taken: :meth:`_take_candidates`); None unless 5 or more
        agree within an interquartile range of 0.05.
        """
        r = [p for p in (self._example_phase.get(od) for od in onsets) if p is not None]
        if len(r) < 5:
            return None
        q1, q2, q3 = np.percentile(r, [25, 50, 75])
        if q3 - q1 > 0.05 or not 0.1 <= q2 <= 0.9:
            return None
        return float(q2)

    def _envelope(self, seg: np.ndarray, hc: np.ndarray, key: int | None = None
                  ) -> np.ndarray:
        """Envelope of the matched-filter output of one chunk, at every R-th sample.

        ``seg`` holds the chunk's samples (output i is the correlation of
        ``seg[i:i + L]`` with the template).  By overlap-save blocks of M
        samples (``nB`` of them, V apart), each block's output analytic
        signal z has the one-sided spectrum Z (the block's spectrum times the
        template's conjugate, band-masked, times 2).  With R = 2,
        ``z[2 u] = (1/M) sum_k Z[k] exp(2 pi i k u / (M / 2))``, and Z is zero
        from bin M / 2 on (the band mask stops at 0.45 of the decimated rate),
        so ``z[2 u]`` is exactly the inverse DFT of length M / 2 of the
        product's first M / 2 bins: half the work of the whole output.  The
        10 ms statistics and the peaks read these samples; a peak's time is
        interpolated between them.  The block spectra are kept for the next
        template on the same chunk (``key``).
        """
        M, Q, V = self.M, self.Q, self.V
        if key is None or key != self._spec_key:
            ext = np.zeros((self.nB - 1) * V + M, dtype=np.float32)
            ext[Q:Q + seg.size] = seg[:ext.size - Q]
            blocks = np.lib.stride_tricks.as_strided(
                ext, shape=(self.nB, M), strides=(V * ext.itemsize, ext.itemsize),
                writeable=False)
            self._spec = sp_fft.rfft(blocks, axis=1)[:, :M // 2]
            self._spec_key = key
        z = sp_fft.ifft(self._spec * hc, axis=1, overwrite_x=True)
        return np.abs(z[:, Q // 2:(Q + V) // 2]).reshape(-1)[:self.n_env]

    def _bin_medians(self, env: np.ndarray) -> np.ndarray:
        """Median of env (every R-th sample) per 10 ms bin (the upper median: an order statistic)."""
        g = self.G // self.R
        nb = env.size // g
        return np.partition(env[:nb * g].reshape(nb, g), g // 2, axis=1)[:, g // 2]

    def advance(self, complete_until_in: float, *, final: bool) -> None:
        """Scan the chunks whose audio and accepted clicks are complete."""
        done_d = complete_until_in / self.q

        def ready(slot: list) -> bool:
            a = slot[3]
            if a >= self.n:
                return False
            if final:
                return True
            need = a + self.C + self.E2 + self.L
            if self.n < need or done_d < need:
                return False
            # without its template, a chunk waits while the template may still
            # form in time for it: the main one, until the accepted clicks are
            # that far ahead; the second one (made as the main template scans
            # on), until the main template has scanned that far ahead
            if slot[0] is not None:
                return True
            if slot is self.slots[1] and self.slots[0][0] is not None:
                return self.slots[0][3] >= a + self.C + self.lookback
            return done_d >= a + self.C + self.lookback

        while True:
            # the earliest chunk first, so both templates scan a chunk in turn
            ok = [slot for slot in self.slots if ready(slot)]
            if not ok:
                break
            slot = min(ok, key=lambda sl: sl[3])
            # (a chunk the main template formed too late for is given up as
            # if it had been given up without it: its template's last example
            # lies more than the look-back past the chunk's end.  Streamed,
            # such a chunk is given up unless the template forms within the
            # same call; placing the formation in the stream makes the
            # chunks scanned the same whatever the calls.  The second
            # template's chunks too: streamed, they pass at the same pace
            # until the main template forms)
            late = slot[3] < self._first_chunk()
            if slot[0] is not None and not late:
                self._scan(slot[3], next(i for i, sl in enumerate(self.slots) if sl is slot))
            slot[3] += self.C
            # the second template, from examples and by folding, in stream
            # order: once the main template has scanned to a place, every
            # click before it is known (so block sizes do not matter).  Not
            # at a chunk the main template formed too late for: streamed,
            # such chunks pass without it, and a fold there would spend one
            # of the tries only when the audio came in one piece
            if slot is self.slots[0] and slot[0] is not None and not late:
                self._take_candidates(slot[3])
                if (self.slots[1][0] is None and self._folds < self.fold_tries
                        and slot[3] >= self._next_fold):
                    self._next_fold = slot[3] + self.fold_every
                    self._folds += 1
                    if self._fold_second(slot[3]):
                        self.examples, self.example_onsets = [], []
        first = min(s[3] for s in self.slots)
        # (and 1 s more: the main clicks before a chunk place its second clicks)
        keep = first - self.E - self.P - self.C
        if self._band_e is not None and (self.slots[1][0] is not None
                                         or self._folds >= self.fold_tries):
            self._band_e = None  # no fold to come
        if keep > self.b0:
            self.buf = self.buf[keep - self.b0:]
            if self._band_e is not None:
                self._band_e = [e[keep - self.b0:] for e in self._band_e]
            self.b0 = keep
        lo = first - self.E - self.C
        if self.onsets and self.onsets[0] < lo:
            del self.onsets[:bisect.bisect_left(self.onsets, lo)]
        if self.quick and self.quick[0] < lo:
            del self.quick[:bisect.bisect_left(self.quick, lo)]
        for found in (self.main_found, self.filled_found):
            if found and found[0] < lo:
                del found[:bisect.bisect_left(found, lo)]

    def _scan(self, a: int, si: int) -> None:
        hc = self.slots[si][0]
        R, G = self.R, self.G
        s0 = a - self.E - self.P  # decimated index of seg[0]
        n_out = self.C + self.E + self.E2  # output samples (decimated rate)
        m = n_out + self.L - 1
        if s0 >= self.b0 and s0 + m <= self.b0 + self.buf.size:  # (the usual case: a view)
            seg = self.buf[s0 - self.b0:s0 - self.b0 + m]
        else:  # (zeros where no audio is kept)
            seg = np.zeros(m, dtype=np.float32)
            lo, hi = max(s0, self.b0), min(s0 + m, self.b0 + self.buf.size)
            if hi > lo:
                seg[lo - s0:hi - s0] = self.buf[lo - self.b0:hi - self.b0]
        # env[j] <-> the output at R j <-> a click whose onset is at base + R j
        env = self._envelope(seg, hc, a)
        n_env = env.size
        base = a - self.E
        i0 = bisect.bisect_left(self.onsets, base - self.E2)
        i1 = bisect.bisect_left(self.onsets, base + n_out + self.E2)
        on = np.array(self.onsets[i0:i1], dtype=np.int64) - base
        r_near = round(0.010 * self.fs_d)  # within 10 ms of an accepted click
        expect = si == 1 and self.phase is not None
        # (for the expected-click search, the envelope samples [near_lo, near_hi)
        # of each accepted click, in order; the free scan asks at its peaks)
        near = (-((r_near - on) // R), (on + r_near) // R + 1)
        # noise level: the envelope's median per 10 ms bin; the floor is the
        # lower decile of those medians over each second of the chunk and
        # its margins (robust to clicks covering up to 90 % of the time),
        # divided by its value for noise alone; near a point, the median over
        # the 50-20 ms before it (so speech and other sounds raise the
        # level) -- the larger is used
        if base < 0:  # before the stream's start: no audio, no statistics
            env_s = env.copy()
            j0 = -(base // R)
            env_s[:j0] = np.median(env[j0:])
        else:
            env_s = env
        g = G // R  # envelope samples per bin
        nb = n_env // g
        bm = self._bin_medians(env_s)
        spans, sec_of_bin, offs = self._scan_consts(nb)
        floors = np.array([float(_percentile(bm[u:v], 10)) for u, v in spans]) / self.slots[si][4]
        # (per bin: the floor of the second its start lies in)
        floor = floors[sec_of_bin]
        # bins where accepted clicks (and their rings) fill the envelope: not
        # used as the local level before a point (a second click follows its
        # main one); a bin is busy when [onset - L, onset + E2 + E) reaches it
        b_lo = _clip_int(on - self.L, 0, n_out)
        b_hi = _clip_int(on + self.E2 + self.E, 0, n_out)
        reach = b_hi > b_lo
        busy = _cover(b_lo[reach] // G, (b_hi[reach] + G - 1) // G, nb)
        bm_local = np.where(busy, 0.0, bm)
        pre = np.concatenate([np.full(4, bm_local[0] if nb else 0.0), bm_local])
        p0, p1, p2 = pre[0:nb], pre[1:nb + 1], pre[2:nb + 2]
        prev = p0 + p1 + p2 - np.maximum(np.maximum(p0, p1), p2) - np.minimum(
            np.minimum(p0, p1), p2)  # median of three
        lvl_b = np.maximum(floor[:nb], prev) / 1.1774
        if nb:  # the level at envelope sample j is that of its bin (the last bin's past the end)
            lvl = np.append(lvl_b, lvl_b[-1])
        else:
            lvl = np.full(1, float(np.median(env)) / 1.1774)

        def level_at(j: np.ndarray | int) -> np.ndarray:
            return lvl[np.minimum(j // g, lvl.size - 1)]

        # the peak tests' spans, in envelope samples (offsets: 1 .. r1, 1 .. r2, l2 .. l1)
        l1 = round((self.L + round(0.004 * self.fs_d)) / R)
        off_r1, off_r2, off_l = offs
        j0, j1 = -(-self.E // R), min(-(-(self.E + self.C) // R), n_env - 1)
        # (each test on the candidates the ones before left standing; first a
        # bound every peak over the threshold passes: above it times the lowest level)
        c = np.flatnonzero(env[j0:j1] >= np.float32(0.99 * self.threshold * float(lvl.min()))
                           ) + j0
        c = c[(env[c] >= env[c - 1]) & (env[c] > env[c + 1])]  # the peaks
        if on.size:  # no accepted click within r_near
            cf = R * c
            k = np.minimum(np.searchsorted(on, cf - r_near), on.size - 1)
            c = c[~((on[k] >= cf - r_near) & (on[k] <= cf + r_near))]
        c = c[env[c] / np.maximum(level_at(c), 1e-30) >= self.threshold]
        last = n_env - 1  # (indices past the end clipped: env >= 0 and the end is in the window)
        c = c[base + R * c - R * l1 >= 0]  # the stream's start is no reference
        c = c[env[c] > env[c[:, None] - off_r1].max(axis=1)]
        c = c[env[c] >= env[np.minimum(c[:, None] + off_r2, last)].max(axis=1)]
        c = c[env[c] >= 2.0 * env[c[:, None] - off_l].max(axis=1)]
        filled = (self._missed_mains(base, n_out, env, floor, near, c, off_l) if si == 0
                  else c[:0])
        if filled.size:
            c = np.union1d(c, filled)
        if expect:
            guided = np.array(self._expected(base, n_out, env, floor, near), dtype=np.int64)
            order = np.unique(np.concatenate([c, guided]))
        else:
            order = c  # (sorted and distinct already)
        if order.size == 0:
            return
        # (order is c and the expected search's finds: those not in c are
        # that search's alone; without it, none)
        self.click_guided.extend((~_among(order, c)).tolist())
        of = R * order  # output samples (decimated) of the peaks
        at = (base + of - self.b0).tolist()
        rings = self._rings(at, si)
        other = self._rings(at, 1 - si) if self.slots[1 - si][0] is not None else None
        w = _rows(seg, of, self.L).astype(np.float64)
        fit = env[order] / np.sqrt(np.maximum(np.einsum("ij,ij->i", w, w), 1e-30))
        self.click_fit.extend(np.minimum(fit, 1.0).tolist())
        self.click_slot.extend([si] * order.size)
        if si == 0:
            # (the main clicks found between known ones are kept apart: the
            # folds read them only when the free scan's finds leave too few
            # cycles)
            was_filled = _among(order, filled)  # (filled is part of c, here order)
            self.main_found.extend((base + of[~was_filled]).tolist())
            self.filled_found.extend((base + of[was_filled]).tolist())
        # the peak's time between the envelope's samples: quadratic
        # interpolation (in float64: a float32 sum would round the stream
        # index itself, by up to 16 decimated samples after 93 minutes)
        al, be, ga = (env[order - 1].astype(np.float64), env[order].astype(np.float64),
                      env[order + 1].astype(np.float64))
        den = al - 2 * be + ga
        frac = np.where(den < 0, 0.5 * (al - ga) / np.where(den < 0, den, -1.0), 0.0)
        onsets_in = np.round((base + R * (order + frac)) * self.q).astype(np.int64).tolist()
        if other is not None:
            self.other_ring.update(zip(onsets_in, other))
        strength = 20 * np.log10(env[order] / np.maximum(level_at(order), 1e-30))
        # the level: the largest sample within 5 ms of the onset
        peaks = self._peaks(base + of)
        for onset_in, ring, st, peak in zip(onsets_in, rings, strength.tolist(),
                                            peaks.tolist()):
            self.clicks.append(Click(time_s=onset_in / self.fs_in, sample=onset_in,
                                     level_dbfs=round(20 * math.log10(max(peak, 1e-10)), 3),
                                     strength=round(float(st), 3), ring_hz=ring, decay_s=None))

    def _scan_consts(self, nb: int) -> tuple[list[tuple[int, int]], np.ndarray, tuple]:
        """What every chunk's scan with ``nb`` 10 ms bins shares (made once).

        The floor's spans (bins of each second of the chunk with its
        margins), the second each bin's start lies in (one bin past the end
        too), and the offsets (envelope samples, as rows) of the peak tests:
        1 .. r1 before, 1 .. r2 after, l2 .. l1 before.
        """
        got = self._consts.get(nb)
        if got is None:
            R, G, S = self.R, self.G, self.S
            spans = [(k * S // G, (k * S + S + self.E + self.E2) // G)
                     for k in range(self.C // S)]
            sec = (np.arange(nb + 1) * G - self.E) // S
            sec = _clip_int(sec, 0, len(spans) - 1)
            r1, r2 = round(0.005 * self.fs_d / R), round(0.012 * self.fs_d / R)
            l1 = round((self.L + round(0.004 * self.fs_d)) / R)
            l2 = round((self.L + round(0.001 * self.fs_d)) / R)
            offs = (np.arange(1, r1 + 1)[None, :], np.arange(1, r2 + 1)[None, :],
                    np.arange(l2, l1 + 1)[None, :])
            got = self._consts[nb] = (spans, sec, offs)
        return got

    def _expected(self, base: int, n_out: int, env: np.ndarray, floor: np.ndarray,
                  near: tuple[np.ndarray, np.ndarray]) -> list[int]:
        """Second clicks where the cycle puts them (bounded search, lower threshold).

        For each main click of the chunk, the second click is expected
        ``phase`` x the local period later (the median of the 9 nearest
        intervals between main clicks, leaving out those under 0.75 of their
        upper quartile, which a second click split); within +-(1 ms + 3 % of
        that delay) the envelope's largest peak counts at ``expect_threshold``
        times the noise level (the search is a few samples wide, so far fewer
        noise peaks compete than in the free scan).  The main clicks are those
        like the main template; when the second template came from folding
        (the clicks are deep in noise, where a click's likeness to the
        template is uncertain), every accepted click but those that follow
        their click at the phase and are followed by the next at the rest of
        the period.  ``env`` holds every R-th output sample and ``near`` holds
        the starts and ends (both non-decreasing) of its spans within 10 ms of
        the accepted clicks; ``floor`` is the floor
        per 10 ms bin (and one past the end); returns indices into ``env``.
        """
        if self.folded:
            # (the main template's finds up to this chunk's end, those of
            # :meth:`_missed_mains` too: it scans each chunk before the second
            # template does; and the quick rejected
            # candidates like the main template and about as loud as the
            # main clicks, so that main clicks a reverberant room kept from
            # being accepted do not leave double periods, while the room's
            # echoes, 7 dB or more quieter, stay out)
            lo, hi = base - round(self.fs_d), base + n_out
            ons = self._all_clicks(lo, hi, base + self.E + self.C, filled=True)
            quick = _between(self.quick, lo, hi)
            if quick.size and ons.size >= 4:
                like = np.array([m is True for m in self._match_main(quick)], dtype=bool)
                loud = self._peaks(quick) >= 0.6 * np.percentile(self._peaks(ons), 75)
                ons = np.union1d(ons, quick[like & loud]).astype(np.int64)
        else:
            ons = self._mains(base - round(self.fs_d), base + n_out)
        if ons.size < 3:
            return []
        gaps = np.diff(ons).astype(np.float64)
        period = _local_periods(gaps)  # around each gap (the upper quartile is kept)
        m0 = ons[1:]  # the click after each gap
        ok = period <= 0.5 * self.fs_d
        if self.folded:
            # not itself a second click: one that follows its click at the
            # phase and is followed by the next at the rest of the period
            after = np.append(gaps[1:] / period[1:], np.nan)
            at_phase = np.abs(gaps / period - self.phase) <= 0.07
            followed = np.isnan(after) | (np.abs(after - (1.0 - self.phase)) <= 0.07)
            ok &= ~(at_phase & followed)
        delay = self.phase * period[ok]
        pred = m0[ok] + np.round(delay).astype(np.int64) - base
        half = np.round(0.001 * self.fs_d + 0.03 * delay).astype(np.int64)
        if self.folded:
            nxt = np.append(gaps[1:], np.nan)  # the cycle each main click starts
            self._vote_delay(m0[ok], nxt[ok], period[ok], base, n_out, env, floor, near)
        return self._search(pred, half, n_out, env, floor, [near]).tolist()

    def _vote_delay(self, m0: np.ndarray, cycle: np.ndarray, period: np.ndarray, base: int,
                    n_out: int, env: np.ndarray, floor: np.ndarray,
                    near: tuple[np.ndarray, np.ndarray]) -> None:
        """Where a folded second click lies in cycles far from the fold's period: place or delay.

        A second snap of the diaphragm keeps its place in the cycle (its
        delay follows the period); the room's answer to each click keeps its
        delay in seconds.  At the fold's period (``phase_period``) the two
        coincide; where the period is more than 10 % longer or shorter
        (start-up, fade) they part.  A folded template's finds come almost
        all from the bounded search at the place (:meth:`_expected`), which
        cannot tell the two apart, so here each cycle whose local
        ``period`` lies more than 10 % from the fold's, from main click
        ``m0`` to the next (``cycle`` samples later, within 20 % of
        ``period``: no main click missed), is searched at both places,
        ``phase`` x ``period`` (as the search at the place does) and
        ``phase`` x the fold's period after ``m0`` (all decimated samples),
        each within +-(1 ms + 3 % of that delay), where the two do not meet
        (:meth:`_window_peaks`).  Of the two windows' peaks that pass, the
        one rising more over the envelope 2-4 ms before it is a vote for its
        place: in a reverberant room the room's answer to every click passes
        the bounded search's threshold at either place alone, and it is
        louder at the earlier one.  Read by :meth:`echo_delay_s`.
        """
        ref = self.phase_period
        with np.errstate(invalid="ignore"):  # (NaN: the last click's cycle, unknown)
            far = (np.abs(cycle / period - 1.0) <= 0.2) & (np.abs(period / ref - 1.0) > 0.10)
        d_place = self.phase * period[far]
        d_fixed = np.full(d_place.shape, self.phase * ref)
        h_place = np.round(0.001 * self.fs_d + 0.03 * d_place).astype(np.int64)
        h_fixed = np.round(0.001 * self.fs_d + 0.03 * d_fixed).astype(np.int64)
        apart = np.abs(d_place - d_fixed) > h_place + h_fixed
        if not apart.any():
            return
        m = m0[far][apart] - base
        votes = []
        for d, h in ((d_place, h_place), (d_fixed, h_fixed)):
            pred = m + np.round(d[apart]).astype(np.int64)
            w, _i, good, rise = self._window_peaks(pred, h[apart], n_out, env, floor, [near])
            r = np.zeros(m.size)  # per cycle: the rise of a peak that counts, else 0
            r[w[good]] = rise[good]
            votes.append(r)
        # (the room's answer decays through the cycle: a window's peak is
        # judged by its rise over what comes just before it, not its height)
        self.delay_votes[0] += int(np.sum(votes[0] > votes[1]))
        self.delay_votes[1] += int(np.sum(votes[1] > votes[0]))

    def echo_delay_s(self) -> float | None:
        """The delay (s) of the room's answer a folded second template took for a second click.

        Where the cycles far from the fold's period (:meth:`_vote_delay`)
        put the folded family's peaks at the fixed delay more often than at
        the place in the cycle, beyond chance: a one-sided sign test (the
        binomial tail of the fixed delay's votes among both, Dixon & Mood,
        "The statistical sign test", JASA 41, 1946) at 1 % (seven votes or
        more, then).  Then the folded family is the room answering each
        click; else None.  (The level is our own choice: in the generator's
        reverberant rooms, one-click engines taken for two-click ones gave
        12:0 (p = 0.02 %), 17:5 (0.8 %) and 12:4 (4 %, left as it was); the
        two-click engines 74:60 (13 %) at most.)
        """
        at_place, at_delay = self.delay_votes
        if not self.folded:
            return None
        if _sign_test_p(at_delay, at_place + at_delay) < 0.01:
            return self.phase * self.phase_period / self.fs_d
        return None

    def _search(self, pred: np.ndarray, half: np.ndarray, n_out: int, env: np.ndarray,
                floor: np.ndarray, avoid: list[tuple[np.ndarray, np.ndarray]]) -> np.ndarray:
        """The bounded search of :meth:`_expected` and :meth:`_missed_mains`.

        Within +-``half`` of each predicted output sample ``pred`` (both
        relative to the chunk's base, decimated samples) lying in the chunk,
        and meeting none of the spans [lo, hi) of ``avoid`` (envelope
        samples; per pair, both non-decreasing), the envelope's largest
        sample counts when it is a peak, stands no lower than the envelope
        2-4 ms before it (not the falling shoulder of something earlier) and
        reaches ``expect_threshold`` times the noise level of its floor
        alone.  Returns those peaks' indices into ``env``.
        """
        _w, i, good, _rise = self._window_peaks(pred, half, n_out, env, floor, avoid)
        return i[good]

    def _window_peaks(self, pred: np.ndarray, half: np.ndarray, n_out: int, env: np.ndarray,
                      floor: np.ndarray, avoid: list[tuple[np.ndarray, np.ndarray]]
                      ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """:meth:`_search`'s windows: which were searched, their peaks, which count, the rises.

        Returns the indices (into ``pred``) of the windows searched, the
        index into ``env`` of each one's largest sample, whether it counts,
        and its ratio to the envelope 2-4 ms before it.
        """
        R = self.R
        w = np.flatnonzero((pred >= self.E) & (pred < min(self.E + self.C, n_out - 1)))
        pred, half = pred[w], half[w]
        # the search windows [a, b) in envelope samples
        a = np.maximum(-((half - pred) // R), 1)
        b = np.minimum((pred + half) // R + 1, env.size - 1)
        keep = a < b
        for lo, hi in avoid:
            keep &= ~_meets(lo, hi, a, b)
        a, b, w = a[keep], b[keep], w[keep]
        if a.size == 0:
            none = np.zeros(0, dtype=np.int64)
            return none, none, np.zeros(0, dtype=bool), np.zeros(0)
        span = np.arange(int((b - a).max()))[None, :]
        idx = a[:, None] + span
        vals = np.where(idx < b[:, None], env[np.minimum(idx, env.size - 1)], -np.inf)
        i = a + np.argmax(vals, axis=1)
        q1, q2 = round(0.002 * self.fs_d / R), round(0.004 * self.fs_d / R)
        ref = env[np.maximum(i[:, None] - q2 + np.arange(q2 - q1)[None, :], 0)].max(axis=1)
        # (a floor of zero, in digital silence, as the free scan's 1e-30)
        fl = np.maximum(floor[np.minimum(i // (self.G // R), floor.size - 1)], 1e-30)
        good = ((env[i] * (1.1774 / fl) >= self.expect_threshold)
                & (env[i] >= env[i - 1]) & (env[i] >= env[i + 1]) & (env[i] >= ref))
        with np.errstate(divide="ignore", invalid="ignore"):
            rise = env[i] / ref
        return w, i, good, rise

    def _missed_mains(self, base: int, n_out: int, env: np.ndarray, floor: np.ndarray,
                      near: tuple[np.ndarray, np.ndarray], found: np.ndarray,
                      off_l: np.ndarray) -> np.ndarray:
        """Main clicks the free scan missed between known ones, where the cycle puts them.

        The known main clicks are the accepted clicks like the main template,
        the main template's finds in the chunks before (from 1 s before
        this chunk) and ``found``, this chunk's finds (indices into ``env``;
        ``off_l``: the free scan's rise-test offsets, as rows).
        The shortest usual interval between them (their lower quartile) is
        the period; an interval of 2 to 6 periods (within 25 %) holds missed
        main clicks, expected at equal steps across it; each is searched
        within +-(1 ms + 4 % of a step) (:meth:`_search`: the envelope's
        largest peak there at ``expect_threshold`` times the floor), away
        from the accepted clicks and the finds (10 ms).  A peak counts when
        it also rises as the free scan's do (twice the envelope from the
        template's length + 1 ms to + 4 ms before it) and stands at half or
        more of the median envelope peak of the chunk's known main clicks (4
        or more of them): a main click missed in noise is about as loud as
        the others, while in a reverberant room at a high click-to-noise
        ratio the room's response, far above the noise floor, stays under
        that.  The finds are main clicks (kind 0); they count for the second
        clicks' search of a folded template, and for a fold only when the
        free scan's finds leave too few cycles (see :meth:`_fold_second`).
        Returns indices into ``env``.
        """
        R = self.R
        none = np.zeros(0, dtype=np.int64)
        lo, hi = base - round(self.fs_d), base + n_out
        ons = np.union1d(np.union1d(self._mains(lo, hi), _between(self.main_found, lo, hi)),
                         base + R * found)
        if ons.size < 4:
            return none
        gaps = np.diff(ons).astype(np.float64)
        p0 = float(_percentile(gaps, 25))
        if not 0 < p0 <= 0.5 * self.fs_d:
            return none
        k = np.round(gaps / p0)
        step = gaps / np.maximum(k, 1.0)
        holds = np.flatnonzero((k >= 2) & (k <= 6) & (np.abs(step / p0 - 1.0) < 0.25))
        if holds.size == 0:
            return none
        # (per interval, its k - 1 places)
        reps = (k[holds] - 1).astype(np.int64)
        g = np.repeat(holds, reps)
        j = np.arange(reps.sum()) - np.repeat(np.cumsum(reps) - reps, reps) + 1
        pred = np.round(ons[g] + j * step[g]).astype(np.int64) - base
        half = np.round(0.001 * self.fs_d + 0.04 * step[g]).astype(np.int64)
        rn = round(0.010 * self.fs_d) // R
        i = self._search(pred, half, n_out, env, floor, [near, (found - rn, found + rn + 1)])
        kj = (ons - base) // R
        kj = kj[(kj >= 2) & (kj < env.size - 3)]
        if i.size == 0 or kj.size < 4:
            return none
        known = env[kj[:, None] + np.arange(-2, 3)[None, :]].max(axis=1)
        rise = env[np.maximum(i[:, None] - off_l, 0)].max(axis=1)
        return i[(env[i] >= 0.5 * float(np.median(known))) & (env[i] >= 2.0 * rise)]

    def _rings(self, starts: list[int], si: int) -> list[float | None]:
        """Ring frequency (Hz) of the 20 ms tails at these buffer indices.

        The largest of the spectrum values on a grid within +-8 % of the
        family's ring (0.25 % steps; a direct DFT of the Hann-windowed tail),
        refined by quadratic interpolation of the log magnitude (Smith &
        Serra 1987); None where the tail is not in the buffer.
        """
        out: list[float | None] = [None] * len(starts)
        m = round(0.020 * self.fs_d)
        st = np.array(starts, dtype=np.int64)
        ok = np.nonzero((st >= 0) & (st + m <= self.buf.size))[0]
        if ok.size == 0:
            return out
        slot = self.slots[si]
        if slot[5] is None:  # the DFT basis of this family (made once)
            grid = slot[1] * np.arange(0.92, 1.0801, 0.0025)
            t = np.arange(m) / self.fs_d
            basis = np.hanning(m)[None, :] * np.exp(-2j * math.pi * grid[:, None] * t[None, :])
            # (rows: the real parts, then the imaginary parts)
            slot[5] = (grid, np.concatenate([basis.real, basis.imag]).astype(np.float32))
        grid, basis = slot[5]
        tails = _rows(self.buf, st[ok], m)
        prod = _row_dots(tails, basis)
        ng = grid.size
        db = 20 * np.log10(np.hypot(prod[:, :ng], prod[:, ng:]) + 1e-30)
        k = np.argmax(db, axis=1)
        for row, (j, kk) in enumerate(zip(ok.tolist(), k.tolist())):
            f = float(grid[kk])
            if 0 < kk < grid.size - 1:
                # (in float64: a float32 ring would reach the clicks and the JSON)
                al, be, ga = float(db[row, kk - 1]), float(db[row, kk]), float(db[row, kk + 1])
                den = al - 2 * be + ga
                if den < 0:
                    f += 0.5 * (al - ga) / den * float(grid[1] - grid[0])
            out[j] = f
        return out


def _sign_test_p(wins: int, n: int) -> float:
    """One-sided sign test: P(X >= wins) for X binomial with n trials and p = 1/2.

    The binomial tail as the regularised incomplete beta function,
    I_1/2(wins, n - wins + 1) (Abramowitz & Stegun, 26.5.24, from memory):
    no sum of binomial coefficients, which overflows a float past about a
    thousand trials (a long run's votes: a random search found 2150).
    """
    if n <= 0 or wins <= 0:
        return 1.0
    if wins > n:
        return 0.0
    return float(special.betainc(wins, n - wins + 1, 0.5))


def _between(values: list[int], lo: int, hi: int) -> np.ndarray:
    """The values in [lo, hi) of a sorted list of integers, as an int64 array."""
    return np.array(values[bisect.bisect_left(values, lo):bisect.bisect_left(values, hi)],
                    dtype=np.int64)


def _among(values: np.ndarray, part: np.ndarray) -> np.ndarray:
    """Which of the sorted, distinct ``values`` are in ``part`` (each of part's is one of them).

    ``np.isin(values, part)`` for this case, by one binary search per element
    of ``part``: a tenth of np.isin's time on the few dozen finds of a scan
    chunk, where it runs three times (twice on the main template's scan,
    once on the second's).
    """
    mask = np.zeros(values.size, dtype=bool)
    mask[np.searchsorted(values, part)] = True
    return mask


def _rows(x: np.ndarray, starts: np.ndarray, length: int) -> np.ndarray:
    """Row i of the result is x[starts[i]:starts[i] + length] (a copy) of a 1-D x."""
    return _windows(x[None, :], length)[0, starts]


def _click_share_filtered(h: np.ndarray, fs: float, f_hz: np.ndarray, on_pow: np.ndarray,
                          off_pow: np.ndarray) -> np.ndarray:
    """A folded template kept where the second click stands out of what surrounds it.

    At the second click's phase the cycles hold the click, the noise and
    whatever else was there anyway: in a room, the main click's
    reverberation, which rings where the main click rings.  The matched
    filter is already the best one for white noise; against coloured
    interference it weights the signal's spectrum by the interference's
    inverse (Turin 1960).  So each frequency is weighted by the click's
    share of the power there once the noise floor is set aside,
    ``max(0, 1 - (off - floor) / on)`` with ``on_pow`` the mean power
    spectrum at the phase, ``off_pow`` just before it (at frequencies
    ``f_hz``) and ``floor`` the median of ``off_pow`` from 500 Hz to 0.45 x
    ``fs`` (a Wiener gain, Wiener 1949, from memory, for the interference
    above the noise floor).  In a dry room the weight is about one and the
    template stays as it is; where an echo rang before the click, its
    frequencies are dropped.  The weight is applied with zero phase
    (``fs``: the template's sample rate), the onset stays where it was;
    zero mean, unit norm.
    """
    band = (f_hz >= 500.0) & (f_hz <= 0.45 * fs)
    floor = float(np.median(off_pow[band])) if band.any() else 0.0
    excess = np.maximum(off_pow - floor, 0.0)
    share = np.clip(1.0 - excess / np.maximum(on_pow, 1e-30), 0.0, 1.0)
    return _reweighted(h, fs, lambda fr: np.interp(fr, f_hz, share))


def _octave_about(h: np.ndarray, fs: float, centre_hz: float) -> np.ndarray:
    """A template band-limited to the octave about ``centre_hz`` (Hz).

    Gain ``cos^2(pi log2(f / centre_hz))`` within half an octave either side
    of the centre (1 there, falling to 0 at the band's edges), 0 outside;
    applied with zero phase (``fs``: the template's sample rate, Hz); zero
    mean, unit norm.  Half an octave keeps out the next mode of a clamped
    plate on either side (a clamped circle's second mode rings 2.08 times as
    high as its first: Leissa, NASA SP-160, 1969, Table 2.1; the values in
    :mod:`popmeter.plate`).
    """
    def gain(fr: np.ndarray) -> np.ndarray:
        octaves = np.log2(np.maximum(fr, 1e-3) / centre_hz)
        return np.where(np.abs(octaves) < 0.5, np.cos(np.pi * octaves) ** 2, 0.0)

    return _reweighted(h, fs, gain)


def _reweighted(h: np.ndarray, fs: float, gain: Callable[[np.ndarray], np.ndarray]
                ) -> np.ndarray:
    """``h`` filtered with zero phase by the real ``gain`` (a function of frequency, Hz).

    ``fs``: the sample rate of ``h`` (Hz).  The onset stays where it was;
    zero mean, unit norm (``h`` itself when nothing is left).
    """
    L = h.size
    n = int(2 ** math.ceil(math.log2(4 * L)))
    fr = np.arange(n // 2 + 1) * (fs / n)
    padded = np.zeros(n)
    padded[L:2 * L] = h  # (room either side for the weight's response)
    out = sp_fft.irfft(sp_fft.rfft(padded) * gain(fr), n)[L:2 * L]
    out -= out.mean()
    norm = float(np.linalg.norm(out))
    return out / norm if norm > 0 else h


def _windows(x: np.ndarray, length: int) -> np.ndarray:
    """Every window of ``length`` along the last axis of a 2-D x (a read-only view).

    The view ``numpy.lib.stride_tricks.sliding_window_view(x, length, axis=1)``
    makes, without its checks (which cost more than the work on a few rows);
    for a C-contiguous x, made straight on its memory (a third of the time
    of ``as_strided``, which the others get).
    """
    shape = (x.shape[0], x.shape[1] - length + 1, length)
    strides = (x.strides[0], x.strides[1], x.strides[1])
    if x.flags.c_contiguous and x.size:
        out = np.ndarray(shape, dtype=x.dtype, buffer=x, strides=strides)
        out.flags.writeable = False
        return out
    return np.lib.stride_tricks.as_strided(x, shape=shape, strides=strides, writeable=False)


def _clip_int(x: np.ndarray, lo: int, hi: int) -> np.ndarray:
    """``np.clip(x, lo, hi)`` of integers (lo <= hi), without np.clip's checks.

    Those cost more than the work on the few integers of a scan chunk or a
    batch of candidates.
    """
    return np.minimum(np.maximum(x, lo), hi)


def _row_dots(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``a @ b.T`` for a few rows of a (float32), without a BLAS matrix product.

    A small matrix product handed to a multithreaded BLAS can take a hundred
    times longer when the cores are busy (its threads wait for one another):
    on a loaded 2-core machine a whole detection took 13 s instead of 2.5 s.
    Dot products row by row (``numpy.vecdot``, numpy 2; else ``einsum``) are
    never split across threads.
    """
    vecdot = getattr(np, "vecdot", None)
    if vecdot is not None:
        return vecdot(a[:, None, :], b[None, :, :])
    return np.einsum("km,gm->kg", a, b)


def _cover(starts: np.ndarray, ends: np.ndarray, n: int) -> np.ndarray:
    """Mask of length n, True within the intervals [start, end) (clipped to 0..n)."""
    mask = np.zeros(n, dtype=bool)
    for a, b in zip(_clip_int(starts, 0, n).tolist(), _clip_int(ends, 0, n).tolist()):
        mask[a:b] = True
    return mask


def _meets(lo: np.ndarray, hi: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Whether each span [a, b) shares a point with one of the spans [lo, hi).

    ``lo`` and ``hi`` are non-decreasing (so the first span ending after a
    is the only one to ask) and ``lo < hi``; the same as asking a mask of
    the spans [lo, hi) (:func:`_cover`) for a True in [a, b), without
    building it.
    """
    i = np.searchsorted(hi, a, side="right")  # the first span with hi > a
    out = np.zeros(a.shape, dtype=bool)
    has = i < hi.size
    out[has] = lo[i[has]] < b[has]
    return out


def _percentile(x: np.ndarray, q: float) -> np.floating:
    """``np.percentile(x, q)`` of a 1-D array, the same value, without its overhead.

    Linear interpolation between the two order statistics around
    ``(n - 1) q / 100`` (Hyndman & Fan 1996, definition 7, numpy's default),
    computed as numpy does (partition, then its two-sided lerp in the array's
    dtype); about 15 times faster on the 100 values of a scan chunk.
    """
    n = x.size
    vi = (n - 1) * (q / 100)
    lo = min(max(math.floor(vi), 0), n - 1)
    hi = min(lo + 1, n - 1)
    t = vi - lo
    part = np.partition(x, (lo, hi) if hi != lo else lo)
    a, b = part[lo], part[hi]
    d = b - a
    return b - d * (1 - t) if t >= 0.5 else a + d * t


def _median9(x: np.ndarray) -> np.ndarray:
    """Per element, the median of the 9 around it (the ends padded with the end values)."""
    return np.median(np.lib.stride_tricks.sliding_window_view(np.pad(x, 4, mode="edge"), 9),
                     axis=1)


def _local_periods(gaps: np.ndarray, *, keep: float = 0.75, shifted_ends: bool = False,
                   width: int = 9) -> np.ndarray:
    """Per gap, the median of the gaps around it that reach ``keep`` x their upper quartile.

    The ``width`` gaps around it: 9 by default; 4 k + 1 for some k >= 1 (so
    that numpy's quartile lands on one of the sorted values).  With
    ``shifted_ends``, the ``(width - 1) / 2`` gaps at either end take the
    value of the first or last whole window (when there are ``width`` or
    more gaps) instead of windows padded with the end gap: at the start of a
    run a first gap that a click splits would otherwise fill half the window.

    The same values as ``np.nanmedian(np.where(w >= keep * uq, w, nan), axis=1)``
    with ``w`` the windows of the edge-padded gaps and ``uq`` their
    ``np.percentile(w, 75, axis=1)`` (numpy's linear method lands exactly on
    the value at index 3 (width - 1) / 4 of each sorted window: the 7th of
    9), from one sort of the windows: the gaps kept are the top of each
    sorted row, and their median is its middle (the mean of the two middle
    values for an even count, as numpy takes it).  ``keep`` in (0, 1] (gaps
    are not negative).  About 8 times faster than the numpy formulation on a
    chunk's 25 gaps.
    """
    if width < 5 or (width - 1) % 4:
        raise ValueError(f"width={width}: must be 4 k + 1 with k >= 1")
    h = (width - 1) // 2
    g = np.asarray(gaps, dtype=np.float64)
    if g.size == 0:
        return np.zeros(0)
    if shifted_ends and g.size >= width:
        inner = _local_periods(g, keep=keep, width=width)[h:-h]  # (the whole windows)
        return np.concatenate([np.repeat(inner[:1], h), inner, np.repeat(inner[-1:], h)])
    padded = np.concatenate([np.repeat(g[:1], h), g, np.repeat(g[-1:], h)])  # (edge padding)
    s = np.sort(_windows(padded[None, :], width)[0], axis=1)
    q3 = 3 * (width - 1) // 4
    first = np.count_nonzero(s < keep * s[:, q3:q3 + 1], axis=1)  # the kept ones are s[first:]
    m = width - first
    r = np.arange(s.shape[0])
    a, b = s[r, first + (m - 1) // 2], s[r, first + m // 2]
    return np.where(a == b, a, (a + b) / 2.0)


def _one_per_cycle(clicks: list[Click], *, share: float = 0.5, quieter_db: float = 3.0,
                   echo_s: float | None = None) -> tuple[list[Click], list[Click]]:
    """A one-click engine's clicks, without the echoes of a click.

    An engine that gives one click per cycle gives no click a fraction of a
    period after the one before; a quieter click there (``quieter_db`` or
    more under the one before it, and within ``share`` of the local period
    after it, or between two clicks one local period apart, within 15 %) is
    the room's reflection of that click or its reverberation swelling again,
    and is set aside.  "The one before" is the last click kept: a room may
    answer a click with several reflections, a later one louder than an
    earlier one.  The local period is the median of the last 9 intervals
    between the clicks kept, once there are 3; before that, the median of
    the 9 intervals around (at the start, the first 9), leaving out those
    under 0.75 of their upper quartile (which such a click splits).  Fewer
    than 12 clicks are kept as they are (no period to trust).  With
    ``echo_s`` (seconds), the delay of a reflection of every click that the
    kinds pass has measured (:func:`_fixed_delay`), a click that delay after
    the last click kept (within 1 ms + 3 %) and quieter than it is set aside
    too, whatever the period.  Returns (kept with their cycles renumbered,
    set aside).
    """
    n = len(clicks)
    if n < 12:
        return clicks, []
    t = [c.time_s for c in clicks]
    lv = [c.level_dbfs for c in clicks]
    # (per gap: before each click from the second on)
    per = _local_periods(np.diff(t), shifted_ends=True)
    echo = np.zeros(n, dtype=bool)
    ref = 0  # the last click kept
    kept_gaps: list[float] = []  # between the clicks kept
    for i in range(1, n):
        # (once 3 intervals between kept clicks are known, their median of
        # the last 9 is the period: where a room answers most clicks with
        # two reflections, no interval between neighbours is a period)
        p = statistics.median(kept_gaps[-9:]) if len(kept_gaps) >= 3 else float(per[i - 1])
        # within ``share`` of the period after it, or later in the cycle,
        # where the clicks on either side of it are one period apart
        near = (t[i] - t[ref] < share * p
                or (i + 1 < n and abs((t[i + 1] - t[ref]) / p - 1.0) <= 0.15))
        # (or, with a reflection's delay known, quieter at that delay: in
        # noise a reflection 6 dB down may measure within 3 dB of its click)
        at_echo = (echo_s is not None and lv[i] < lv[ref]
                   and abs(t[i] - t[ref] - echo_s) <= 0.001 + 0.03 * echo_s)
        if at_echo or (near and lv[i] <= lv[ref] - quieter_db):
            echo[i] = True
        else:
            kept_gaps.append(float(t[i] - t[ref]))
            ref = i
    if not echo.any():
        return clicks, []
    kept = [c for c, e in zip(clicks, echo.tolist()) if not e]
    for i, c in enumerate(kept):
        c.cycle = i
    return kept, [c for c, e in zip(clicks, echo.tolist()) if e]


# ---------------------------------------------------------------------------
# whole-recording helpers


def reject_atypical(clicks: list[Click], *, tolerance: float = 0.08,
                    min_share: float = 0.05, known_hz: Sequence[float] = ()
                    ) -> tuple[list[Click], list[Click]]:
    """Split clicks into those that ring like the recording's own clicks and the rest.

    The "families" are the ring frequencies shared by at least ``min_share``
    of the clicks (a histogram of log ring frequency, bins ``tolerance``
    wide); a click is typical when its ring lies within ``tolerance``
    (relative) of a family centre.  A knock on the tank or a bubble in a
    splash rings elsewhere.  With fewer than 8 clicks, nothing is dropped.

    Parameters
    ----------
    clicks : list of Click
    tolerance : float
        Relative ring-frequency tolerance; default 0.08 (8 %).
    min_share : float
        Least share of the clicks that makes a family; default 0.05.
    known_hz : sequence of float
        Ring frequencies (Hz) of families known otherwise, however few of
        ``clicks`` ring there; default none.  The detector passes its
        matched-filter templates' rings: each template is the average of
        the recording's own clicks.

    Returns
    -------
    (kept, dropped) : two lists of Click
    """
    rings = np.array([c.ring_hz if c.ring_hz else np.nan for c in clicks], dtype=float)
    ok = np.isfinite(rings)
    if ok.sum() < 8:
        return list(clicks), []
    lr = np.log(rings[ok])
    width = math.log1p(tolerance)
    edges = np.arange(lr.min() - width, lr.max() + 2 * width, width / 2)
    hist, _ = np.histogram(lr, bins=edges)
    # two-bin sliding sum: a family counted across bin edges
    sums = hist[:-1] + hist[1:]
    need = max(3, math.ceil(min_share * ok.sum()))
    centres = []
    for j in range(len(sums)):
        if sums[j] >= need and sums[j] >= (sums[j - 1] if j > 0 else 0) and \
                sums[j] >= (sums[j + 1] if j + 1 < len(sums) else 0):
            inside = lr[(lr >= edges[j]) & (lr < edges[j + 2])]
            centres.append(float(np.median(inside)))
    centres += [math.log(f) for f in known_hz]
    if not centres:
        return list(clicks), []
    typical = ~ok
    typical[ok] = _log_distance(rings[ok], np.array(centres)) <= width
    kept = [c for c, t in zip(clicks, typical) if t]
    dropped = [c for c, t in zip(clicks, typical) if not t]
    return kept, dropped


def _log_distance(values: np.ndarray | list[float], centres: np.ndarray) -> np.ndarray:
    """Per value, the distance of its natural log (``math.log``) to the nearest centre."""
    logs = np.array([math.log(v) for v in values], dtype=float)
    return np.abs(logs[:, np.newaxis] - centres).min(axis=1)


def _copied(c: Click) -> Click:
    """A new Click with the same fields (what ``copy.copy`` gives, faster)."""
    return Click(c.time_s, c.sample, c.level_dbfs, c.strength, c.ring_hz, c.decay_s,
                 c.kind, c.cycle)


def _second_look(kept: list[Click], pool: list[Click], *, refractory_s: float,
                 tolerance: float = 0.025, found_s: np.ndarray | None = None
                 ) -> list[Click]:
    """Rejected candidates that ring like a family of the accepted clicks.

    A short, bright click (the second click of a two-click engine) often fails
    the tonality tests on its own, yet rings at the same frequency as dozens
    of other clicks; a noise burst does not.  Families are ring frequencies
    (within ``tolerance``) shared by at least 8 clicks or candidates, and by
    at least 5 % of the number of accepted clicks; a candidate within
    ``tolerance`` (relative) of one, and not within the refractory time of an
    accepted click, is promoted -- unless it rings like the accepted click
    just before it (within ``tolerance``), 9 dB or more weaker and within
    60 ms: the room's echo of that click (a hard wall a few metres away; a
    second click is about 6 dB under its main one).  Nothing is promoted in
    a recording with fewer than 8 accepted clicks.

    ``found_s`` (sorted, seconds): clicks the matched filter found that the
    accepted ones do not hold.  A candidate 3 ms or more, but less than the
    refractory time, from one of them is not promoted: two events that
    close are not both the engine's clicks, and the filter's find (like the
    recording's own clicks; a second click, at its place in the cycle) is
    the better evidence.  In a reverberant room the candidate so promoted
    was the room's answer to the main click, ringing as the main click
    rings, 6 ms before the second click it then hid.  (Within 3 ms the two
    are one click: on 22 of the bench's recordings, 1621 of the 1675
    candidates within the refractory time (12.5 ms) of a find lay within
    3 ms of it, the rest spread thinly up to 12.5 ms; our own bar, no
    published source.)
    """
    rings = np.array([c.ring_hz for c in kept if c.ring_hz], dtype=float)
    if rings.size < 8:
        return []
    # families from the accepted clicks and the candidates together: a second
    # click that mostly failed the tests alone still forms a tight family
    lr = np.sort(np.log(np.concatenate([rings, [c.ring_hz for c in pool]])))
    width = math.log1p(tolerance)
    need = max(8, math.ceil(0.05 * rings.size))
    # family centres: densest points (count within +-width) above the need
    lo = np.searchsorted(lr, lr - width)
    hi = np.searchsorted(lr, lr + width, side="right")
    dens = hi - lo
    # (the densest point left is a centre; the points within 2 widths of it go)
    left = lr[np.argsort(-dens, kind="stable")[:np.count_nonzero(dens >= need)]]
    centres: list[float] = []
    while left.size:
        centres.append(float(left[0]))
        left = left[np.abs(left - left[0]) > 2 * width]
    if not centres:
        return []
    times = np.array([c.time_s for c in kept])
    far = _log_distance([c.ring_hz for c in pool], np.array(centres)) > width
    pool_t = np.array([c.time_s for c in pool])
    at = np.searchsorted(times, pool_t).tolist()
    # (a candidate 3 ms to the refractory time from a find of the filter)
    d = _to_neighbours(found_s if found_s is not None else np.zeros(0), pool_t)
    beside = ((d >= 0.003) & (d < refractory_s)).any(axis=1)
    times_list = times.tolist()
    out: list[Click] = []
    for c, j, apart, by_find in zip(pool, at, far.tolist(), beside.tolist()):
        if apart:
            continue
        near = [abs(times_list[m] - c.time_s) for m in (j - 1, j) if 0 <= m < len(times_list)]
        if near and min(near) < refractory_s:
            continue
        if out and c.time_s - out[-1].time_s < refractory_s:
            continue
        if by_find:
            continue
        if j > 0:
            # a copy of the click just before (its ring, 9 dB or more weaker,
            # within 60 ms) is that click's echo from the room, not a click
            b = kept[j - 1]
            if (c.time_s - b.time_s <= 0.060 and b.ring_hz
                    and abs(math.log(c.ring_hz / b.ring_hz)) <= width
                    and c.level_dbfs <= b.level_dbfs - 9.0):
                continue
        out.append(c)  # (:func:`_assign_kinds` copies every click it labels)
    return out


def _unseen(times: np.ndarray | list[float], found: np.ndarray | list[float], *,
            within_s: float = 0.010) -> np.ndarray:
    """Whether each time of ``found`` lies ``within_s`` or farther from every one of ``times``.

    ``times`` sorted (seconds); the matched filter's finds that the clicks
    already held are those within 10 ms of one of them.
    """
    return ~(_to_neighbours(times, found) < within_s).any(axis=1)


def _to_neighbours(times: np.ndarray | list[float], t: np.ndarray | list[float]) -> np.ndarray:
    """Each of ``t``'s distances to its neighbours among the sorted ``times``, shape (len(t), 2).

    Column 0 to the last of ``times`` before it, column 1 to the first at
    or after it (``numpy.searchsorted``'s split); infinite where there is
    none.  Same units as the inputs.
    """
    times = np.asarray(times, dtype=float)
    t = np.asarray(t, dtype=float).reshape(-1)
    d = np.full((t.size, 2), np.inf)
    if times.size:
        j = np.searchsorted(times, t)
        has = j > 0
        d[has, 0] = np.abs(times[j[has] - 1] - t[has])
        has = j < times.size
        d[has, 1] = np.abs(times[j[has]] - t[has])
    return d


def assign_kinds(clicks: list[Click], *, clicks_per_cycle: int | None = None
                 ) -> tuple[list[Click], int]:
    """Decide one or two clicks per cycle and label each click's kind and cycle.

    A two-click engine gives two families of clicks that alternate in time
    and differ in level and timbre.  Each feature (level in dB, log ring
    frequency, log decay time, log interval to the previous click) is
    detrended with a centred 2x8 moving average (which cancels a period-2
    pattern exactly, the classic seasonal filter of X-11 decomposition), and
    the lag-1 autocorrelation of what is left is measured: strongly negative
    (below -0.5) in some feature means alternation.  The clicks are then split
    into two families along the detrended features and the labels smoothed
    by a two-state Viterbi pass that expects alternation but lets it restart
    after a gap (a missed click), so one lost click does not flip the rest.
    Where the two families plainly ring apart, the timbre sets the labels
    (:func:`_by_ring`), and a "main" click where the second click belongs
    becomes a second click (:func:`_second_at_its_place`).
    When the second clicks are found only now and then there is no
    alternation to see; two more tests then also decide "two": a clear
    two-group split in level and timbre (:func:`_bimodal`: Lloyd's 2-means,
    groups 4 or more pooled standard deviations apart, the smaller holding
    15 % or more, and 1 dB or more apart in level or 3 % in ring), or
    quieter clicks arriving at one consistent fraction of the period
    (:func:`_second_click_phase`) -- unless, with no alternation and no
    second template, those quieter clicks ring as the louder ones do: a
    room's reflection of each click (:func:`_quieter_rings_like_louder`).
    The louder family is the main click (kind 0).  Last, a second family
    whose delay after its main click stays fixed in seconds where the period
    changes (the start-up and the fade) is a wall's or the room's reflection
    of each click, not a second snap (:func:`_fixed_delay`): one click per
    cycle.

    Parameters
    ----------
    clicks : list of Click
        In time order (a whole recording, or a recent window live).
    clicks_per_cycle : int or None
        Force 1 or 2; default ``None`` decides from the clicks (1 when fewer
        than 12 clicks).

    Returns
    -------
    (clicks, clicks_per_cycle)
        New Click objects with ``kind`` and ``cycle`` set, and the decision.
    """
    out, cpc, _seen, _echo = _assign_kinds(clicks, clicks_per_cycle=clicks_per_cycle, hints=None)
    return out, cpc


def _assign_kinds(clicks: list[Click], *, clicks_per_cycle: int | None,
                  hints: np.ndarray | None, guided: np.ndarray | None = None,
                  echo_s: float | None = None
                  ) -> tuple[list[Click], int, int, float | None]:
    """:func:`assign_kinds`, with ``hints``: per click 0 or 1 where the matched
    filter's template tells the kind, -1 elsewhere (applied after the labels
    by timbre, before the relabelling by place), and ``guided``: True for
    the clicks only the search for expected second clicks found (left out
    of :func:`_fixed_delay`), and ``echo_s``: the delay (seconds) of the
    room's answer to each click when the matched-filter pass found one
    (:meth:`_TemplateScan.echo_delay_s`), taken when :func:`_fixed_delay`
    finds none.  Also returns the decision the clicks themselves make (the
    same as the one used unless forced) and the delay of a reflection of
    every click (seconds) when either found one, else None."""
    if clicks_per_cycle not in (None, 1, 2):
        raise UsageError(f"clicks_per_cycle={clicks_per_cycle}: must be 1 or 2")
    n = len(clicks)
    out = [_copied(c) for c in clicks]
    if n == 0:
        return out, int(clicks_per_cycle or 1), 1, None
    feats = _kind_features(out)
    alt = _alternation(feats) if n >= 12 else 0.0
    sep, share, cl_labels = _bimodal(feats) if n >= 12 else (0.0, 0.0, np.zeros(n, int))
    times = np.array([c.time_s for c in out])
    phase, short = (_second_click_phase(times, feats[:, 0]) if n >= 12
                    else (None, np.zeros(n, bool)))
    # (or many clicks found by a second template that has its place in the
    # cycle: in deep noise the first stage takes too few of either family for
    # the other tests)
    by_second = int(np.sum(hints == 1)) if hints is not None else 0
    split = sep >= 4.0 and share >= 0.15
    seen = 2 if (alt < -0.5 or split or phase is not None
                 or by_second >= max(8, 0.10 * n)) else 1
    if (seen == 2 and alt >= -0.5 and by_second == 0 and phase is not None
            and _quieter_rings_like_louder(out, short)):
        # no alternation and no second template: quieter clicks at one place
        # in the cycle that ring as the louder ones do are a room's
        # reflection of each click (it keeps the click's spectrum), as for a
        # group of examples like the main template (see _TemplateScan)
        seen = 1
    decided = seen if clicks_per_cycle is None else clicks_per_cycle
    if n < 2 or (decided == 1 and seen == 1):
        return _one_family(out), 1, seen, None
    if alt < -0.5:
        labels = _two_families(out, feats)
    elif split:
        labels = cl_labels
    elif phase is not None:
        labels = short.astype(np.int64)  # a click a consistent fraction of a period late
    else:
        labels = _two_families(out, feats)
    labels = _by_ring(out, np.asarray(labels, dtype=np.int64))
    if hints is not None:
        labels = np.where(hints >= 0, hints, labels)
    labels = _second_at_its_place(times, labels, levels=feats[:, 0])
    fixed = _fixed_delay(times, labels, ignore=guided)
    echo_s = fixed if fixed is not None else echo_s
    if echo_s is not None:
        # the quieter family keeps its delay in seconds as the rate changes:
        # the room's reflection of each click, not a second snap
        seen = 1
        if clicks_per_cycle is None:
            decided = 1
    if decided == 1:
        return _one_family(out), 1, seen, echo_s
    cycle = -1
    for c, lab in zip(out, labels.tolist()):
        c.kind = lab
        if lab == 0:
            cycle += 1
            c.cycle = cycle
        else:
            c.cycle = cycle if cycle >= 0 else None
    return out, 2, seen, echo_s


def _one_family(clicks: list[Click]) -> list[Click]:
    """Label every click a main click, one cycle each (in place; returns them)."""
    for i, c in enumerate(clicks):
        c.kind = 0
        c.cycle = i
    return clicks


def _fixed_delay(times: np.ndarray, labels: np.ndarray, *, ignore: np.ndarray | None = None,
                 far: float = 0.10, min_far: int = 8, ratio: float = 3.0) -> float | None:
    """The delay (seconds) at which the second family follows its main clicks, if it is fixed.

    A second snap of the diaphragm comes at a place in the cycle: its delay
    after the main click grows and shrinks with the period.  A wall's or
    the room's reflection of each click comes a fixed time later (the extra
    path over the speed of sound), whatever the period.  At a steady rate
    the two look alike; where the period differs from its median by more
    than ``far`` (10 %: the start-up and the fade of a run), they part.
    Each second click (``labels`` 1, in ``times``, seconds; not those
    ``ignore`` marks) in a whole cycle (an interval between main clicks
    within 20 % of the local period, the median of the 9 intervals around
    it) has its delay after the main click and that period.  Where the
    period is far from its median, each such click is counted for a fixed
    delay (within 1 ms + 3 % of the median delay of all) or for a fixed
    place (within 1 ms + 3 % of the median of delay over period, times its
    period), when it fits one only.  The delay is fixed when ``min_far`` (8)
    or more fit a fixed delay alone, ``ratio`` (3) times as many as fit a
    fixed place alone; then the median delay is returned, else None (also
    when there are too few clicks to tell).  (On the generator's recordings,
    where the period is far from its median, the median residual of a
    wall's reflections 25-40 ms late, at 30 dB, is 0.1-0.3 ms from a fixed
    delay and 9-12 ms from a fixed place; of second clicks, at 20 and 30 dB,
    6-10 ms and 0.5-1.9 ms.  The thresholds are our own choices, no
    published source.)
    """
    mains = times[labels == 0]
    sec = times[(labels == 1) if ignore is None else ((labels == 1) & ~ignore)]
    if mains.size < 12 or sec.size < min_far:
        return None
    gaps = np.diff(mains)
    period = _median9(gaps)
    i = np.searchsorted(mains, sec, side="right") - 1
    inside = (i >= 0) & (i < gaps.size)
    # whole cycles only: the interval holding the second click about one
    # local period long (no main click missed in it, none extra)
    i = i[inside]
    whole = np.abs(gaps[i] / period[i] - 1.0) <= 0.2
    i = i[whole]
    delay = sec[inside][whole] - mains[i]
    per = period[i]
    if per.size < min_far:
        return None
    away = np.abs(per / np.median(per) - 1.0) > far
    fixed = float(np.median(delay))
    place = float(np.median(delay / per))
    d, p_ = delay[away], per[away]
    by_time = np.abs(d - fixed) <= 0.001 + 0.03 * fixed
    by_place = np.abs(d - place * p_) <= 0.001 + 0.03 * place * p_
    n_time = int(np.sum(by_time & ~by_place))
    n_place = int(np.sum(by_place & ~by_time))
    return fixed if n_time >= min_far and n_time >= ratio * n_place else None


def _quieter_rings_like_louder(clicks: list[Click], quieter: np.ndarray) -> bool:
    """Whether the ``quieter`` clicks' median ring lies within 3 % of the others'.

    Rings as measured (each click's spectral peak), 8 or more on each side;
    False otherwise.  A reflection of a click in the room rings as the
    click does, while a diaphragm's second click rings at its own mix of
    the plate's modes; 3 % is several times the spread of one family's
    rings (the middle half within 0.6 % in a generated reverberant room)
    and under the 8 % by which the matched filter tells a group of examples
    from the main template.  (A two-click engine whose second click rings
    like its main one, found too rarely to alternate and never by a second
    template, is then taken for one click per cycle; ``clicks_per_cycle``
    forces two.)
    """
    q = np.asarray(quieter, dtype=bool)
    r1 = [c.ring_hz for c, is_q in zip(clicks, q.tolist()) if is_q and c.ring_hz]
    r0 = [c.ring_hz for c, is_q in zip(clicks, q.tolist()) if not is_q and c.ring_hz]
    if len(r1) < 8 or len(r0) < 8:
        return False
    return abs(math.log(float(np.median(r1)) / float(np.median(r0)))) < _SAME_RING_LOG


def _by_ring(clicks: list[Click], labels: np.ndarray) -> np.ndarray:
    """Label by timbre when the two families plainly ring apart.

    The log ring frequencies are split in two by Lloyd's 2-means (started
    from their 10th and 90th percentiles).  When the two groups are 15 % or
    more apart, each holds 15 % or more of the rings and each is tight (the
    median absolute deviation of its log ring under 3 %), the groups are the
    families: the one with the louder median level is the main click, and
    each click whose ring was measured (it has a decay time) takes its
    group's kind.  A click the matched filter found keeps its label (its
    ring was looked for near its template's, which tells nothing new;
    :func:`_assign_kinds` lets the template tell its kind).  (The
    alternation and level tests can lose their phase where the rate changes
    fast, at the start and end of a run; the timbre does not change.)
    Otherwise the labels are returned unchanged.
    """
    lab = labels.copy()
    lr = np.array([math.log(c.ring_hz) if c.ring_hz else np.nan for c in clicks])
    have = np.flatnonzero(np.isfinite(lr))
    if have.size < 16:
        return lab
    v = lr[have]
    ca, cb = np.percentile(v, [10, 90])
    g = v > 0.5 * (ca + cb)
    for _ in range(20):
        if g.all() or not g.any():
            return lab
        ca, cb = float(np.mean(v[~g])), float(np.mean(v[g]))
        new = v > 0.5 * (ca + cb)
        if np.array_equal(new, g):
            break
        g = new
    share = min(g.mean(), 1.0 - g.mean())
    spread = max(float(np.median(np.abs(v[g] - np.median(v[g])))),
                 float(np.median(np.abs(v[~g] - np.median(v[~g])))))
    if cb - ca < math.log(1.15) or share < 0.15 or spread >= 0.03:
        return lab
    lv = np.array([clicks[i].level_dbfs for i in have])
    high_is_main = np.median(lv[g]) > np.median(lv[~g])
    # (relabelled: the clicks whose ring was measured, i.e. with a decay time)
    measured = np.array([clicks[i].decay_s is not None for i in have])
    lab[have[measured]] = np.where(g == high_is_main, 0, 1)[measured]
    return lab


def _second_at_its_place(times: np.ndarray, labels: np.ndarray, *,
                         levels: np.ndarray | None = None) -> np.ndarray:
    """Relabel as second clicks the "main" clicks that sit where second clicks belong, and back.

    A second click found only by a template like the main click's may be
    labelled main (and, in a reverberant room, a main click only the second
    template found, second).

    **Local period** at each main click: the median of the 9 main-to-main
    intervals around, leaving out those under 0.7 of their upper quartile;
    of the 25 around where that is under 0.7 of theirs (where second clicks
    labelled main split most of the 9, their quartile is a split interval,
    while the 25's is a whole period until three quarters are split); and
    where it still reads under 0.7 or over 1.5 of the period the click times
    show whatever their labels (:func:`_label_free_periods`, looked for only
    where it reads under 0.8 or over 1.25 of the recording's median: a long
    run of second clicks labelled main halves it, a run of main clicks
    labelled second, their own second clicks missed, doubles it), that one.

    **Place** of the second click: the median of (second click - main click
    before it) / local period, from 8 or more labelled pairs.

    **Relabelling**, in three passes:

    1. a main click that follows another main click at that fraction
       (+-0.08) of the period, and is followed by the next click at the
       rest of the period (+-0.08) or by none, is a second click;
    2. a second click one local period (+-0.08) after the main click before
       it, following that cycle's second click, and followed by the next
       click at the phase or a period later (+-0.08) or by none, is a main
       click;
    3. so is a second click one local period after the main click just
       before it (that cycle's second click missed), followed as in 2, when
       it is as loud as a main click (``levels``, dBFS: no more than 3 dB
       under the main click before it and nearer the main clicks' median
       level than the second clicks'; without ``levels`` no level test).
    """
    lab = labels.copy()
    n = times.size
    mains = np.flatnonzero(lab == 0)
    if mains.size < 3:
        return lab
    gaps = np.diff(times[mains])
    # the local period at each main click: the median of the 9 main-to-main
    # intervals around it, leaving out those under 0.7 of their upper
    # quartile; of the 25 around it where that is under 0.7 of theirs
    local = _local_periods(gaps, keep=0.7)
    wide = _local_periods(gaps, keep=0.7, width=25)
    local = np.where(local < 0.7 * wide, wide, local)
    # where even the 25 are split (a long stretch of second clicks labelled
    # main), or a stretch of main clicks labelled second doubles the
    # intervals, the period the click times show whatever their labels
    # (looked for only where the period reads under 0.8 or over 1.25 of the
    # recording's median, as such a stretch makes it read about half or double)
    med = np.median(local)
    odd = np.flatnonzero((local < 0.8 * med) | (local > 1.25 * med))
    if odd.size:
        free = _label_free_periods(times, mains[odd])
        local[odd] = np.where((local[odd] < 0.7 * free) | (local[odd] > 1.5 * free), free,
                              local[odd])
    period = np.append(local, local[-1])  # at mains[k]: the interval after it
    seconds = np.flatnonzero(lab == 1)
    j = np.searchsorted(mains, seconds) - 1  # the main click before each second click
    use = j >= 0
    seconds, j = seconds[use], j[use]
    use = period[j] > 0
    seconds, j = seconds[use], j[use]
    if seconds.size < 8:
        return lab
    phase = float(np.median((times[seconds] - times[mains[j]]) / period[j]))
    rank = np.cumsum(lab == 0) - 1  # at a main click: its index in ``mains``
    for i in np.flatnonzero((lab[1:] == 0) & (lab[:-1] == 0)) + 1:
        if lab[i - 1] != 0:  # (relabelled a step before)
            continue
        t_p = period[rank[i - 1]]
        if t_p <= 0:
            continue
        here = (times[i] - times[i - 1]) / t_p
        nxt = (times[i + 1] - times[i]) / t_p if i + 1 < n else None
        if abs(here - phase) <= 0.08 and (nxt is None or abs(nxt - (1.0 - phase)) <= 0.08):
            lab[i] = 1
    # and the other way round: a "second" click one local period (+-0.08)
    # after the main click before it, following that cycle's second click,
    # and followed by the next click at the phase or a whole period later (or
    # by none), is the next main click (one only the second template found)
    # (the main clicks now are some of ``mains``: the pass above only took
    # clicks out, so each keeps its local period there)
    def followed_as_main(i: int, t_p: float) -> bool:
        # the next click at the phase or a whole period later, or none
        if i + 1 >= n:
            return True
        nxt = (times[i + 1] - times[i]) / t_p
        return abs(nxt - phase) <= 0.08 or abs(nxt - 1.0) <= 0.08

    now = np.flatnonzero(lab == 0)
    rank = np.cumsum(lab == 0) - 1
    for i in np.flatnonzero((lab[1:] == 1) & (lab[:-1] == 1)) + 1:
        if lab[i - 1] != 1:  # (relabelled a step before)
            continue
        if rank[i] < 0:
            continue
        m = now[rank[i]]  # the main click before
        t_p = period[np.searchsorted(mains, m)]
        if t_p <= 0:
            continue
        if abs((times[i] - times[m]) / t_p - 1.0) <= 0.08 and followed_as_main(i, t_p):
            lab[i] = 0
    # and where that cycle's second click was missed: a "second" click one
    # local period (+-0.08) after the main click just before it, followed as
    # above, and as loud as a main click (``levels``, dBFS: no more than 3 dB
    # under the main click before it, and nearer the main clicks' median
    # level than the second clicks'), is the next main click too (a second
    # click lies a phase, or a period and a phase, after a main click; but
    # where the phase is near one half and the rate jitters, as at the start
    # of a run, a second click may lie one local period -- read from the
    # click times, half the true one -- after its main click: there it is
    # the quieter of the two).  In order, so that a run of such clicks is
    # taken one after the other.
    mid = -math.inf
    if levels is not None and (lab == 0).any() and (lab == 1).any():
        mid = 0.5 * (float(np.median(levels[lab == 0])) + float(np.median(levels[lab == 1])))
    # (the clicks one local period after the click before them, whatever
    # its label, found at once; only those are walked through in order)
    cand = np.flatnonzero(lab[1:] == 1) + 1
    t_pc = period[np.minimum(np.searchsorted(mains, cand - 1), period.size - 1)]
    one_c = (times[cand] - times[cand - 1]) / np.where(t_pc > 0, t_pc, np.inf)
    at_one = np.abs(one_c - 1.0) <= 0.08
    for i, t_p in zip(cand[at_one].tolist(), t_pc[at_one].tolist()):
        if lab[i - 1] != 0:
            continue
        if levels is not None and (levels[i] < levels[i - 1] - 3.0 or levels[i] < mid):
            continue
        if followed_as_main(i, t_p):
            lab[i] = 0
    return lab


def _label_free_periods(times: np.ndarray, centres: np.ndarray, *, half: int = 12,
                        max_lag: int = 4, tol: float = 0.04, share: float = 0.75
                        ) -> np.ndarray:
    """The period (s) around each click ``centres[k]`` from the click times alone.

    Every interval between two of the ``2 half + 1`` clicks around (up to
    ``max_lag`` clicks apart) is a candidate; each scores the intervals within
    ``tol`` (relative) of it.  An engine's clicks recur once a period, so the
    period scores about as many intervals as there are clicks (main to main
    and second to second, a missed click or not), a multiple of it about as
    many, and the delay of the second click only half as many: the period is
    the shortest candidate scoring ``share`` of the best or more, refined as
    the median of the intervals within ``tol`` of it.  (The comb of
    inter-onset intervals, common practice in tempo estimation, e.g. Dixon,
    "Automatic extraction of tempo and beat from expressive performances",
    J. New Music Research 30, 2001; no source for the constants.)  NaN where
    fewer than 4 intervals are found.
    """
    t = np.asarray(times, dtype=np.float64)
    out = np.full(len(centres), np.nan)
    for k, c in enumerate(np.asarray(centres).tolist()):
        w = t[max(0, c - half):c + half + 1]
        if w.size < 2:
            continue
        d = np.concatenate([w[lag:] - w[:-lag] for lag in range(1, max_lag + 1)
                            if lag < w.size])
        d = d[d > 0]
        if d.size < 4:
            continue
        close = np.abs(d[None, :] - d[:, None]) <= tol * d[:, None]
        score = close.sum(axis=1)
        ok = score >= share * score.max()
        best = int(np.flatnonzero(ok)[np.argmin(d[ok])])
        out[k] = float(np.median(d[close[best]]))
    return out


def _kind_features(clicks: list[Click]) -> np.ndarray:
    lvl = np.array([c.level_dbfs for c in clicks], dtype=float)
    ring = np.array([math.log(c.ring_hz) if c.ring_hz else np.nan for c in clicks])
    dec = np.array([math.log(c.decay_s) if c.decay_s else np.nan for c in clicks])
    t = np.array([c.time_s for c in clicks], dtype=float)
    gap = np.full(len(clicks), np.nan)
    if len(clicks) > 1:
        gap[1:] = np.log(np.maximum(np.diff(t), 1e-4))
    f = np.column_stack([lvl, ring, dec, gap])
    for j in range(f.shape[1]):
        col = f[:, j]
        bad = ~np.isfinite(col)
        if bad.all():
            f[:, j] = 0.0
        elif bad.any():
            col[bad] = np.nanmedian(col)
    return f


def _detrend(col: np.ndarray) -> np.ndarray:
    k = np.array([0.5, 1, 1, 1, 1, 1, 1, 1, 0.5]) / 8.0
    if col.size < 9:
        return col - np.mean(col)
    padded = np.pad(col, 4, mode="reflect")
    trend = np.convolve(padded, k, mode="valid")
    return col - trend


def _alternation(feats: np.ndarray) -> float:
    best = 0.0
    for j in range(feats.shape[1]):
        r = _detrend(feats[:, j])
        # robust: clip outliers at 3 MAD
        med = np.median(r)
        mad = np.median(np.abs(r - med)) * _MAD_TO_SIGMA + 1e-12
        r = np.clip(r - med, -3 * mad, 3 * mad)
        den = float(np.dot(r, r))
        if den <= 0:
            continue
        r1 = float(np.dot(r[1:], r[:-1])) / den
        best = min(best, r1)
    return best


def _second_click_phase(times: np.ndarray, levels: np.ndarray
                        ) -> tuple[float | None, np.ndarray]:
    """Timing evidence of a second click: intervals a consistent fraction of the period.

    Each interval is divided by the local period (the upper quartile of the
    17 nearest intervals).  When the second clicks are found only now and
    then, they show up as many intervals at one fraction (0.25-0.75) of the
    period with little spread; stray extra clicks land anywhere.  (When they
    are nearly all found, the alternation test of :func:`assign_kinds`
    decides instead.)

    Returns the fraction (None when there is no such evidence) and a mask of
    the clicks that arrive at that fraction after the click before them.
    """
    n = times.size
    gaps = np.diff(times)
    mask = np.zeros(n, dtype=bool)
    if gaps.size < 10:
        return None, mask
    # main-to-main period: the upper quartile of the nearby intervals (second
    # clicks, found or not, only ever shorten intervals)
    pad = np.pad(gaps, (8, 8), mode="edge")
    period = np.percentile(np.lib.stride_tricks.sliding_window_view(pad, 17), 75, axis=1)
    r = gaps / period
    # level of each click against its two neighbours (dB): a second click is
    # quieter than the main clicks around it; a click found after a missed
    # one (which also lands mid-period) is not
    lv = np.pad(levels, 1, mode="edge")
    contrast = levels - 0.5 * (lv[:-2] + lv[2:])
    sel = (r >= 0.25) & (r <= 0.75) & (contrast[1:] <= -3.0)
    if sel.sum() < max(8, 0.08 * gaps.size):
        return None, mask
    q1, q2, q3 = np.percentile(r[sel], [25, 50, 75])
    if q3 - q1 > 0.15:
        return None, mask
    # the click after a short interval, quieter than its neighbours, is the second one
    mask[1:] = (np.abs(r - q2) <= 0.15) & (contrast[1:] <= -1.5)
    return float(q2), mask


def _bimodal(feats: np.ndarray) -> tuple[float, float, np.ndarray]:
    """Two-means split of the clicks on (level above its running median, log ring, log decay).

    Returns the separation of the two groups (distance of the centres along
    the line joining them, in pooled within-group standard deviations), the
    smaller group's share, and labels (0 for the louder group).  A second
    click family that is often missed does not alternate, but still stands
    apart in level and timbre; one family with drifting level does not.  A
    split whose groups are under 1 dB apart in level and under 3 % in ring
    has separation 0 (decay times alone do not make two families).
    """
    n = feats.shape[0]
    lvl = feats[:, 0]
    # running median over an even window of 10: halfway between two alternating
    # families, on the main family when the second is sparse
    pad = np.pad(lvl, (5, 4), mode="edge")
    trend = np.median(np.lib.stride_tricks.sliding_window_view(pad, 10), axis=1)
    cols = [lvl - trend, feats[:, 1], feats[:, 2]]
    z = []
    for col in cols:
        s_ = np.median(np.abs(col - np.median(col))) * _MAD_TO_SIGMA
        s_ = max(s_, 0.05 if col is cols[0] else 0.01)
        z.append((col - np.median(col)) / s_)
    X = np.clip(np.column_stack(z), -8, 8)
    # 2-means (Lloyd 1982), started from the extremes of the level residual
    order = np.argsort(X[:, 0])
    ca = X[order[int(0.9 * (n - 1))]].copy()
    cb = X[order[int(0.1 * (n - 1))]].copy()
    lab = np.zeros(n, dtype=np.int64)
    for _ in range(20):
        da = ((X - ca) ** 2).sum(axis=1)
        db = ((X - cb) ** 2).sum(axis=1)
        new = (db < da).astype(np.int64)
        if new.sum() in (0, n):
            return 0.0, 0.0, np.zeros(n, dtype=np.int64)
        if np.array_equal(new, lab) and _ > 0:
            break
        lab = new
        ca, cb = X[lab == 0].mean(axis=0), X[lab == 1].mean(axis=0)
    d = cb - ca
    norm = float(np.linalg.norm(d))
    if norm == 0:
        return 0.0, 0.0, lab
    proj = X @ (d / norm)
    within = np.concatenate([proj[lab == 0] - proj[lab == 0].mean(),
                             proj[lab == 1] - proj[lab == 1].mean()])
    sep = norm / (float(np.std(within)) + 1e-9)
    share = float(min(lab.mean(), 1 - lab.mean()))
    if np.median(lvl[lab == 1]) > np.median(lvl[lab == 0]):
        lab = 1 - lab
    # two groups alike in level (under 1 dB apart) and ring (under 3 %) are
    # not two families: a reverberant room splits the measured decay times
    # of one family (one group's decays twice the other's, same level, same
    # ring)
    if (abs(float(np.median(lvl[lab == 0]) - np.median(lvl[lab == 1]))) < 1.0
            and abs(float(np.median(feats[lab == 0, 1]) - np.median(feats[lab == 1, 1])))
            < math.log(1.03)):
        return 0.0, share, lab
    return sep, share, lab


def _two_families(clicks: list[Click], feats: np.ndarray) -> np.ndarray:
    n = len(clicks)
    cols = []
    for j in range(feats.shape[1]):
        r = _detrend(feats[:, j])
        s = np.median(np.abs(r - np.median(r))) * _MAD_TO_SIGMA + 1e-9
        cols.append(np.clip(r / s, -4, 4))
    zf = np.column_stack(cols)
    # direction of alternation: sign pattern (+,-,+,-) projected on features
    alt = np.where(np.arange(n) % 2 == 0, 1.0, -1.0)
    w = zf.T @ alt
    # weigh features by how strongly they alternate
    proj = zf @ (w / (np.linalg.norm(w) + 1e-12))
    # emission costs for two families: centred at +m and -m
    m = float(np.median(np.abs(proj))) + 1e-9
    cost_a = (proj - m) ** 2
    cost_b = (proj + m) ** 2
    t = np.array([c.time_s for c in clicks])
    gaps = np.diff(t)
    typ = float(np.median(gaps)) if gaps.size else 1.0
    # Viterbi: alternation expected; staying in the same family is cheap only after a gap
    stay = np.where(gaps > 1.5 * typ, 0.5, 4.0 * m * m + 1.0)
    # (on Python floats, the two states written out: the same sums as on
    # numpy's, many times faster one by one)
    acc_a, acc_b = float(cost_a[0]), float(cost_b[0])
    back_a, back_b = [0] * n, [1] * n  # the state before, in a and in b
    for i, (st, ca, cb) in enumerate(zip(stay.tolist(), cost_a[1:].tolist(),
                                         cost_b[1:].tolist(), strict=True), start=1):
        stay_a, stay_b = acc_a + st, acc_b + st
        if stay_a <= acc_b:
            new_a = stay_a + ca
        else:
            new_a = acc_b + ca
            back_a[i] = 1
        if stay_b <= acc_a:
            new_b = stay_b + cb
        else:
            new_b = acc_a + cb
            back_b[i] = 0
        acc_a, acc_b = new_a, new_b
    state = int(np.argmin([acc_a, acc_b]))
    path = [state]
    for i in range(n - 1, 0, -1):
        state = (back_a, back_b)[state][i]
        path.append(state)
    lab = np.array(path[::-1], dtype=np.int64)
    lvl = feats[:, 0]
    if (np.any(lab == 0) and np.any(lab == 1)
            and np.median(lvl[lab == 1]) > np.median(lvl[lab == 0])):
        lab = 1 - lab
    return lab


def _result(clicks: list[Click], rejected: int, rejected_times: list[float],
            det: ClickDetector, *, clicks_per_cycle: int | None, duration_s: float,
            atypical: bool = True) -> DetectionResult:
    warnings: list[str] = []
    if atypical:
        # (the matched filter's templates are families of the recording's own
        # clicks even where the frame stage accepted few of them: a two-click
        # engine's second clicks in a reverberant room, found mostly by the
        # filter, whose rare accepted ones were dropped as atypical)
        kept, dropped = reject_atypical(
            clicks, known_hz=det._mf.templates if det._mf is not None else ())
    else:
        kept, dropped = list(clicks), []
    rejected_times = sorted(list(rejected_times) + [c.time_s for c in dropped])
    rejected += len(dropped)
    if atypical and len(kept) < 8:
        # no engine to compare with: a lone transient must at least ring down
        # exponentially (a measurable decay) to count as a click
        lone = [c for c in kept if c.decay_s is None]
        if lone:
            kept = [c for c in kept if c.decay_s is not None]
            rejected += len(lone)
            rejected_times = sorted(rejected_times + [c.time_s for c in lone])
    have_mf = atypical and det._mf is not None and bool(det._mf.clicks)
    mf_times = np.array([c.time_s for c in det._mf.clicks]) if have_mf else np.zeros(0)
    if atypical and det._second_look:
        # (the matched filter's finds the accepted clicks do not already hold:
        # a rejected candidate near one of them, but not the same click, is
        # not promoted; see _second_look)
        mf_new = None
        if have_mf and len(kept) >= 8:
            mf_new = np.sort(mf_times[_unseen([c.time_s for c in kept], mf_times)])
        promoted = _second_look(kept, det._second_look,
                                refractory_s=det._refr * det.hop / det.sample_rate_hz,
                                found_s=mf_new)
        if promoted:
            kept = sorted(kept + promoted, key=lambda c: c.sample)
            gone = {c.time_s for c in promoted}
            rejected_times = [t for t in rejected_times if t not in gone]
            rejected -= len(promoted)
    found_by: dict[int, int] = {}
    guided: set[int] = set()  # the matched filter's finds only the expected-click search made
    slot_of: dict[int, int] = {}  # the template that found each matched-filter click
    if have_mf and len(kept) >= 8:
        # the matched-filter pass: clicks like the recording's own, not already found
        times = np.array([c.time_s for c in kept])
        extra: list[Click] = []
        # (not later than one local interval after the last click the frame
        # detector found: the trailing second click of a two-click engine
        # belongs to the run, pops heard only by the filter long after it
        # do not; a live session ends a run 1 s after that click)
        gaps = np.diff(times[-9:])
        last = times[-1] + (float(np.median(gaps)) if gaps.size else 0.0)
        fits: dict[int, float] = {}
        slots: dict[int, int] = {}
        unseen = _unseen(times, mf_times) & ~(mf_times > last)  # (both templates' finds)
        for c, fit, si, is_guided, is_unseen in zip(det._mf.clicks, det._mf.click_fit,
                                                    det._mf.click_slot, det._mf.click_guided,
                                                    unseen.tolist()):
            if is_unseen:
                extra.append(c)
                fits[id(c)] = fit
                slots[id(c)] = si
                if is_guided:
                    guided.add(c.sample)
        extra.sort(key=lambda c: c.sample)
        merged: list[Click] = []
        for c in extra:  # of two templates' finds of one click, keep the better fit
            if merged and c.time_s - merged[-1].time_s < 0.010:
                if fits[id(c)] > fits[id(merged[-1])]:
                    merged[-1] = c
                continue
            merged.append(c)
        # the template that found a click tells its kind, once the second
        # template has its place in the cycle (then it is the second family)
        slot_of = {c.sample: slots[id(c)] for c in merged}
        if det._mf.phase is not None and not det._mf.second_rings_like_main():
            # (a second template that rings as the main one does is the
            # room's reflection of the main click: its finds keep the kind
            # the clicks themselves give them)
            found_by = slot_of
        if merged:  # (the detector's own objects: _assign_kinds labels copies)
            kept = sorted(kept + merged, key=lambda c: c.sample)
    hints = np.array([found_by.get(c.sample, -1) for c in kept], dtype=np.int64)
    # (the clicks found only where the learnt place in the cycle expects a
    # second click: no evidence of where the second clicks are)
    guided_mask = np.array([c.sample in guided for c in kept], dtype=bool)
    echo_hint = det._mf.echo_delay_s() if det._mf is not None else None
    labelled, cpc, seen, echo_s = _assign_kinds(kept, clicks_per_cycle=clicks_per_cycle,
                                                hints=hints, guided=guided_mask,
                                                echo_s=echo_hint)
    if slot_of:
        # a click the kinds pass gave to the other family than the template
        # that found it: its ring on that family's grid
        other = det._mf.other_ring
        for c in labelled:
            si = slot_of.get(c.sample)
            if si is not None and c.kind != si and c.sample in other:
                c.ring_hz = other[c.sample]
    if cpc == 1 and atypical:
        labelled, echoes = _one_per_cycle(labelled, echo_s=echo_s)
        if echoes:
            rejected += len(echoes)
            rejected_times = sorted(rejected_times + [c.time_s for c in echoes])
    if clicks_per_cycle is not None and len(kept) >= 12 and seen != clicks_per_cycle:
        # a forced decision the clicks contradict: say so
        looks = ("two families of clicks alternating in time" if seen == 2
                 else "one family of clicks")
        # (forced to 1 over two families: right where a wall near the tank
        # answers each click, which the decision may take for a second click)
        why = (" unless the quieter family is the room's reflection of each click"
               if seen == 2 else "")
        warnings.append(f"clicks per cycle forced to {clicks_per_cycle}, but the clicks look "
                        f"like {seen} per cycle ({looks}); rates and phases may be wrong"
                        f"{why}")
    if clicks_per_cycle is None and cpc == 2:
        mains = sum(1 for c in labelled if c.kind == 0)
        seconds = len(labelled) - mains
        if mains >= 12 and seconds < _WEAK_SECOND_SHARE * mains:
            warnings.append(
                f"two clicks per cycle, but a second click was found in only "
                f"{100.0 * seconds / mains:.0f} % of the cycles: in a reverberant room the "
                "room's answer to each click can pass for a weak second click; if the engine "
                "is known to give one click per cycle, force one (rates and phases depend on it)")
    rings = [c.ring_hz for c in labelled if c.kind == 0 and c.ring_hz]
    ring = float(np.median(rings)) if rings else None
    all_rings = [c.ring_hz for c in labelled if c.ring_hz]
    if det._forced is not None:
        band = det._forced
    elif len(all_rings) >= 3:
        # where the clicks ring: 5th to 95th percentile of the rings, widened by 10 %
        lo, hi = np.percentile(all_rings, [5, 95])
        band = (round(float(lo) / 1.1, 1), round(float(hi) * 1.1, 1))
    else:
        band = det.band_hz or (float(det._bin_hz[0]), float(det._bin_hz[-1]))
    if not labelled:
        if duration_s <= 0:
            warnings.append("no audio: zero samples analysed")
        else:
            warnings.append(f"no clicks found in {duration_s:.1f} s of audio "
                            f"({rejected} other transients rejected)")
    if det.clipped_samples:
        at_full = sum(1 for c in labelled if c.level_dbfs >= _FULL_SCALE_DBFS)
        if clicks_per_cycle is None and len(labelled) >= 12 and at_full >= 0.5 * len(labelled):
            # (the kinds pass tells the families apart by level among other
            # things; clipped to one level, that cue is gone: on a generated
            # two-click engine driven 20 dB past full scale, one run of two
            # was decided one-click and its rate came out nearly doubled)
            warnings.append(
                f"clipping: {det.clipped_samples} samples at full scale, and "
                f"{100.0 * at_full / len(labelled):.0f} % of the clicks reach it: their levels "
                f"cannot be compared, so the decision of {cpc} click(s) per cycle may be wrong "
                "(rates and phases depend on it); lower the input gain, or force "
                "--clicks-per-cycle if the engine is known")
        else:
            warnings.append(f"clipping: {det.clipped_samples} samples at full scale; click "
                            "levels are underestimated, times are still measured")
    return DetectionResult(clicks=labelled, clicks_per_cycle=cpc, rejected=rejected,
                           band_hz=(float(band[0]), float(band[1])), ring_hz=ring,
                           warnings=warnings, rejected_times_s=rejected_times,
                           duration_s=duration_s, clipped_samples=det.clipped_samples)


def finish_detection(detector: ClickDetector, clicks: list[Click], *,
                     clicks_per_cycle: int | None = None) -> DetectionResult:
    """The whole-recording passes on the clicks a detector has returned so far.

    What :func:`detect_clicks_in_blocks` does after the last block: clicks that
    ring like no family of the recording's clicks are set aside
    (:func:`reject_atypical`), rejected candidates that ring like a family
    are taken back, a lone transient without an exponential decay is
    dropped, the clicks found by the matched-filter pass and not already
    present (none within 10 ms), up to the last click found so far, are
    added, and one or two clicks per cycle is decided (:func:`assign_kinds`);
    a matched-filter click given to the other family than the template that
    found it takes its ring on that family's grid; in a one-click engine,
    the echoes of a click are set aside (:func:`_one_per_cycle`).  Live
    capture calls this on the stream so far (it does not change the
    detector).

    Parameters
    ----------
    detector : ClickDetector
        The detector that produced ``clicks``.
    clicks : list of Click
        Everything its ``process``/``flush`` calls returned, in order.
    clicks_per_cycle : int or None
        Force 1 or 2; default ``None`` decides.

    Returns
    -------
    DetectionResult
    """
    return _result(list(clicks), detector.rejected, list(detector.rejected_times_s), detector,
                   clicks_per_cycle=clicks_per_cycle,
                   duration_s=detector.samples_seen / detector.sample_rate_hz)


def _joined(blocks: Iterable[np.ndarray], min_size: int) -> Iterable[np.ndarray]:
    """The blocks, consecutive ones joined until at least ``min_size`` samples.

    The detector gives the same clicks whatever the block size; it spends a
    fixed time per block, so a file's small reading blocks (65536 samples)
    are fed four at a time (2^18 float32 samples: 1 MB, 5.5 s at 48 kHz).
    """
    parts: list[np.ndarray] = []
    size = 0
    for b in blocks:
        parts.append(np.asarray(b).reshape(-1))
        size += parts[-1].size
        if size >= min_size:
            yield parts[0] if len(parts) == 1 else np.concatenate(parts)
            parts, size = [], 0
    if parts:
        yield parts[0] if len(parts) == 1 else np.concatenate(parts)


def detect_clicks_in_blocks(
    blocks: Iterable[np.ndarray],
    sample_rate_hz: float,
    *,
    band_hz: tuple[float, float] | None = None,
    clicks_per_cycle: int | None = None,
    **detector_options,
) -> DetectionResult:
    """Detect the clicks of a stream of blocks (bounded memory).

    Parameters
    ----------
    blocks : iterable of np.ndarray
        1-D float blocks in order (e.g. ``popmeter.audio_io.open_stream``).
    sample_rate_hz : float
        Sample rate in Hz.
    band_hz : (float, float) or None
        Force the detection band (Hz); default ``None`` finds it.
    clicks_per_cycle : int or None
        Force 1 or 2; default ``None`` decides from the clicks.
    **detector_options
        Passed to :class:`ClickDetector` (``max_rate_hz``, ``threshold``...).

    Returns
    -------
    DetectionResult
    """
    det = ClickDetector(sample_rate_hz, band_hz=band_hz, **detector_options)
    clicks: list[Click] = []
    for b in _joined(blocks, 2 ** 18):
        clicks.extend(det.process(b))
    clicks.extend(det.flush())
    return _result(clicks, det.rejected, det.rejected_times_s, det,
                   clicks_per_cycle=clicks_per_cycle,
                   duration_s=det.samples_seen / float(sample_rate_hz))


def detect_clicks(
    samples: np.ndarray,
    sample_rate_hz: float,
    *,
    band_hz: tuple[float, float] | None = None,
    clicks_per_cycle: int | None = None,
    **detector_options,
) -> DetectionResult:
    """Detect the clicks of a whole recording held in memory.

    The same as :func:`detect_clicks_in_blocks` with one block; see there
    for the parameters.  ``samples`` is 1-D (one channel), full scale 1.0.
    """
    x = np.asarray(samples)
    if x.ndim != 1:
        raise UsageError(f"detect_clicks: samples must be 1-D (one channel), got shape {x.shape}")
    return detect_clicks_in_blocks([x], sample_rate_hz, band_hz=band_hz,
                                   clicks_per_cycle=clicks_per_cycle, **detector_options)
