"""The detector's small array helpers against the plain numpy formulations they replace."""

import math

import numpy as np
import pytest

from popmeter.detection import (
    ClickDetector,
    _aic_split_rows,
    _among,
    _cover,
    _local_periods,
    _meets,
    _percentile,
    _row_dots,
    _rows,
    _sign_test_p,
    _TemplateScan,
    _unseen,
    _whole_cycles,
    _windows,
    _with_neighbours,
)


@pytest.mark.parametrize("q", [5, 10, 25, 50, 75, 90, 95])
def test_percentile_equals_numpy(q):
    # reference: numpy.percentile, default "linear" method (Hyndman & Fan 1996, type 7)
    rng = np.random.default_rng(7)
    for n in list(range(1, 12)) + [103, 240, 1001]:
        for _ in range(20):
            x = (rng.standard_normal(n) * 10.0 ** rng.uniform(-4, 2)).astype(np.float32)
            if rng.integers(3) == 0:
                x = np.round(x, 1)  # ties
            expected = np.percentile(x, q)
            got = _percentile(x.copy(), q)
            assert got == expected
            assert got.dtype == expected.dtype


def test_cover_equals_difference_counts():
    # reference: +1 at each start, -1 at each end (numpy.add.at), running sum > 0
    rng = np.random.default_rng(8)
    n = 500
    for _ in range(200):
        starts = np.sort(rng.integers(-100, n + 100, rng.integers(0, 30)))
        ends = starts + rng.integers(0, 80, starts.size)
        edges = np.zeros(n + 1, dtype=np.int64)
        np.add.at(edges, np.clip(starts, 0, n), 1)
        np.add.at(edges, np.clip(ends, 0, n), -1)
        assert np.array_equal(_cover(starts, ends, n), np.cumsum(edges[:-1]) > 0)


def test_meets_equals_a_mask_and_its_running_count():
    # reference: the plain form it replaces, a boolean mask of the spans
    # (difference counts, numpy.add.at) and "its running count differs at a and b"
    rng = np.random.default_rng(12)
    n = 400
    for _ in range(300):
        on = np.sort(rng.integers(-60, n + 60, rng.integers(0, 25)))
        width = int(rng.integers(1, 40))
        lo, hi = on - width, on + width + 1  # (non-decreasing, lo < hi)
        edges = np.zeros(n + 1, dtype=np.int64)
        np.add.at(edges, np.clip(lo, 0, n), 1)
        np.add.at(edges, np.clip(hi, 0, n), -1)
        cn = np.concatenate([[0], np.cumsum(np.cumsum(edges[:-1]) > 0)])
        a = rng.integers(0, n, 50)
        b = np.minimum(a + rng.integers(-5, 30, 50), n)
        expected = (a < b) & (cn[np.maximum(a, b)] != cn[a])
        assert np.array_equal((a < b) & _meets(lo, hi, a, b), expected)


def test_among_equals_numpy_isin():
    # reference: numpy.isin, for sorted distinct values and a part of them
    # (the matched filter's finds and the subsets it marks), empty ones too
    rng = np.random.default_rng(13)
    for _ in range(300):
        values = np.unique(rng.integers(-50, 30000, rng.integers(0, 60)))
        part = rng.permutation(values)[:rng.integers(0, values.size + 1)]
        assert np.array_equal(_among(values, part), np.isin(values, part))


def test_rows_equals_fancy_indexing():
    rng = np.random.default_rng(9)
    x = rng.standard_normal(50).astype(np.float32)
    starts = rng.integers(0, 41, 6)
    ref = x[starts[:, None] + np.arange(10)[None, :]]
    assert np.array_equal(_rows(x, starts, 10), ref)


def test_windows_equal_sliding_window_view():
    # reference: numpy.lib.stride_tricks.sliding_window_view, on C-contiguous,
    # strided (a view with a step), read-only and one-row inputs
    rng = np.random.default_rng(13)
    base = rng.standard_normal((5, 61)).astype(np.float32)
    ro = base.copy()
    ro.flags.writeable = False
    for x in (base, base[:, ::2], base[1:3, 5:], ro, base[2][None, :], base[:, :7]):
        for length in (1, 3, 7):
            ref = np.lib.stride_tricks.sliding_window_view(x, length, axis=1)
            got = _windows(x, length)
            assert got.shape == ref.shape and not got.flags.writeable
            assert np.array_equal(got, ref)
            starts = rng.integers(0, x.shape[1] - length + 1, 4)
            assert np.array_equal(_rows(x[0], starts, length),
                                  x[0][starts[:, None] + np.arange(length)[None, :]])


@pytest.mark.parametrize("fs", [44100, 48000, 64000, 96000])
def test_decimation_by_any_blocks_equals_one_block_and_scipy_lfilter(fs):
    # the detector's anti-alias FIR and decimation by q, fed in blocks of 1 to
    # 7 samples (fewer than q at 64 and 96 kHz, so some blocks keep no sample),
    # against one block (bit for bit) and against scipy.signal.lfilter with
    # the same taps, every q-th output kept (float64 reference: float32 apart)
    from scipy import signal

    x = (np.random.default_rng(14).standard_normal(3000) * 0.3).astype(np.float32)
    whole = ClickDetector(fs)
    whole.process(x)
    q = whole._q
    ref = signal.lfilter(whole._aa, [1.0], x.astype(np.float64))[::q]
    # (the detector keeps the decimated samples from _d0 on; the matched
    # filter's buffer, from b0 on, all of them here)
    assert whole._d0 + whole._d.size == ref.size == whole._mf.b0 + whole._mf.buf.size
    np.testing.assert_allclose(whole._d, ref[whole._d0:], rtol=0, atol=1e-6)
    np.testing.assert_allclose(whole._mf.buf, ref[whole._mf.b0:], rtol=0, atol=1e-6)
    for sizes in ([1], [1, 2, 3], [7, 1, 1, 5]):
        det = ClickDetector(fs)
        i = k = 0
        while i < x.size:
            n = sizes[k % len(sizes)]
            det.process(x[i:i + n])
            i, k = i + n, k + 1
        assert det._n_dec == whole._n_dec
        d = det._d0 - whole._d0
        assert np.array_equal(det._d, whole._d[d:])
        assert np.array_equal(det._mf.buf, whole._mf.buf[det._mf.b0 - whole._mf.b0:])


@pytest.mark.parametrize("width", [9, 25])
def test_local_periods_equals_numpy(width):
    # reference: numpy.percentile (linear method) and numpy.nanmedian over the
    # ``width``-wide windows of the edge-padded gaps, the formulation it replaces
    rng = np.random.default_rng(10)
    h = (width - 1) // 2
    for n in list(range(1, 14)) + [40, 120]:
        for _ in range(30):
            gaps = rng.integers(1, 4000, n).astype(np.float64)
            if rng.integers(2) == 0:  # two-click engine: short and long gaps, some merged
                gaps = np.where(rng.random(n) < 0.5, 0.3, 0.7) * 2400.0 + rng.normal(0, 20, n)
                gaps[rng.random(n) < 0.1] *= 2.0
            if rng.integers(3) == 0:
                gaps = np.round(gaps, -2)  # ties
            win = np.lib.stride_tricks.sliding_window_view(np.pad(gaps, h, mode="edge"), width)
            uq = np.percentile(win, 75, axis=1)
            for keep in (0.75, 0.7):
                expected = np.nanmedian(np.where(win >= keep * uq[:, None], win, np.nan),
                                        axis=1)
                got = _local_periods(gaps, keep=keep, width=width)
                assert np.array_equal(got, expected)
                # shifted ends: the first and last whole windows' values at the ends
                shifted = _local_periods(gaps, keep=keep, width=width, shifted_ends=True)
                if n >= width:
                    inner = expected[h:-h]
                    assert np.array_equal(shifted[h:-h], inner)
                    assert np.all(shifted[:h] == inner[0]) and np.all(shifted[-h:] == inner[-1])
                else:
                    assert np.array_equal(shifted, expected)
    assert _local_periods(np.zeros(0)).size == 0
    with pytest.raises(ValueError):
        _local_periods(np.ones(5), width=8)


def test_row_dots_equals_matmul():
    # reference: numpy.matmul in float64 (float32 sums: a few ulps apart)
    rng = np.random.default_rng(11)
    for k in (0, 1, 7, 40):
        a = rng.standard_normal((k, 480)).astype(np.float32)
        b = rng.standard_normal((130, 480)).astype(np.float32)
        got = _row_dots(a, b)
        assert got.shape == (k, 130)
        ref = a.astype(np.float64) @ b.astype(np.float64).T
        assert np.allclose(got, ref, rtol=0, atol=1e-4 * max(1.0, float(np.abs(ref).max(initial=0))))


@pytest.mark.parametrize("fs_d", [24000.0, 22050.0, 16000.0])
def test_scan_envelope_is_the_analytic_signal_of_the_filter_output(fs_d):
    # the matched-filter scan reads its output's envelope at every second
    # sample, block by block (overlap-save, half-length inverse FFTs);
    # outside reference: the analytic signal of the whole band-limited filter
    # output in one piece, by scipy.signal.hilbert (Marple, IEEE Trans.
    # Signal Process. 47, 1999)
    from scipy import signal

    from popmeter.detection import _TemplateScan

    scan = _TemplateScan(2 * fs_d, 2, fs_d)
    rng = np.random.default_rng(3)
    t = np.arange(scan.L) / fs_d
    h = np.sin(2 * np.pi * 1700.0 * t) * np.exp(-t / 0.003)
    h = (h - h.mean()) / np.linalg.norm(h - h.mean())
    scan._install(scan.slots[0], h)
    m = scan.C + scan.E + scan.E2 + scan.L - 1
    seg = rng.standard_normal(m).astype(np.float32)
    seg[m // 3:m // 3 + scan.L] += 30.0 * h.astype(np.float32)  # (a click)
    env = scan._envelope(seg, scan.slots[0][0])
    # the filter output itself, in one long FFT: correlation with the
    # template, band-limited to 300 Hz .. 0.45 x the rate
    n = 4 * m
    f = np.fft.rfftfreq(n, 1.0 / fs_d)
    mask = (f >= 300.0) & (f <= 0.45 * fs_d)
    y = np.fft.irfft(np.fft.rfft(seg.astype(np.float64), n) * np.conj(np.fft.rfft(h, n)) * mask,
                     n)
    ref = np.abs(signal.hilbert(y))[:2 * env.size:2]
    assert env.size == -(-(scan.C + scan.E + scan.E2) // 2)
    # the blocks' band-mask edges are coarser (M-point) than the long one's:
    # 0.06-0.14 % of the peak at most, 0.2-0.4 % of the typical value
    # (misaligned blocks, off by one sample, would be tens of percent off)
    assert np.max(np.abs(env - ref)) <= 0.005 * np.max(ref)
    assert np.median(np.abs(env - ref)) <= 0.01 * np.median(ref)


def test_copied_click_equals_copy_copy():
    # reference: copy.copy (a shallow copy), compared field by field (dataclasses.fields)
    import copy
    import dataclasses

    from popmeter.detection import Click, _copied

    names = [f.name for f in dataclasses.fields(Click)]
    # a distinct object in every field (a field added to Click and not copied fails here)
    marked = Click(**{name: object() for name in names})
    for c in (Click(1.25, 60000, -12.5, 21.0, 3150.0, 0.004, 1, 7),
              Click(0.5, 24000, -30.0, 9.0, None, None), marked):
        got, ref = _copied(c), copy.copy(c)
        assert got is not c and type(got) is type(ref)
        for name in names:
            assert getattr(got, name) is getattr(ref, name)


def test_log_distance_equals_one_value_at_a_time():
    # reference: math.log and numpy's min of absolute differences, one value at a time
    import math

    from popmeter.detection import _log_distance

    rng = np.random.default_rng(10)
    values = rng.uniform(400.0, 9000.0, 300)
    centres = np.log(rng.uniform(400.0, 9000.0, 3))
    expected = [np.min(np.abs(math.log(v) - centres)) for v in values]
    assert np.array_equal(_log_distance(values, centres), expected)
    assert np.array_equal(_log_distance(values.tolist(), centres), expected)


def _aic_split(aw: np.ndarray) -> np.ndarray:
    """The direct cumulative-sum form of the AIC change point (Maeda 1985; the
    two-segment form of Sleeman & van Eck, PEPI 1999) on whole rows: the length
    of the first segment (2 .. n - 4) that minimises the criterion."""
    n = aw.shape[1]
    c1 = np.cumsum(aw, axis=1)
    c2 = np.cumsum(aw * aw, axis=1)
    kk = np.arange(1, n)[None, :]
    s1, q1 = c1[:, :-1], c2[:, :-1]
    s2, q2 = c1[:, -1:] - s1, c2[:, -1:] - q1
    var1 = np.maximum(q1 / kk - (s1 / kk) ** 2, 1e-30)
    var2 = np.maximum(q2 / (n - kk) - (s2 / (n - kk)) ** 2, 1e-30)
    aic = kk * np.log(var1) + (n - kk - 1) * np.log(var2)
    return 2 + np.argmin(aic[:, 1:n - 4], axis=1)


def test_aic_split_rows_equals_aic_split():
    # reference: _aic_split, the direct cumulative-sum form of the AIC picker
    # (Maeda 1985; Sleeman & van Eck, PEPI 1999), row by row
    rng = np.random.default_rng(11)
    for n in (12, 40, 432):
        for _ in range(40):
            k = int(rng.integers(1, 30))
            aw = (rng.standard_normal((k, n)) * 10.0 ** rng.uniform(-5, 0)).astype(np.float32)
            onset = rng.integers(2, n - 2, k)
            aw[np.arange(n)[None, :] >= onset[:, None]] *= rng.uniform(1.0, 50.0)
            if rng.integers(4) == 0:
                aw[0] = 0.0  # a silent row: every variance at its floor
            got = _aic_split_rows(aw)
            assert np.array_equal(got, np.concatenate([_aic_split(r[None, :]) for r in aw]))
            assert np.array_equal(got, _aic_split(aw))


def test_aic_split_rows_equals_aic_split_on_float64_rows():
    # the fold's averaged window is float64; reference as above
    rng = np.random.default_rng(12)
    for n in (20, 60):
        for _ in range(40):
            aw = rng.standard_normal((1, n)) * 10.0 ** rng.uniform(-5, 0)
            aw[0, int(rng.integers(2, n - 2)):] *= rng.uniform(1.0, 50.0)
            assert np.array_equal(_aic_split_rows(aw), _aic_split(aw))


def test_ring_test_on_the_coarse_grid_equals_the_fine_one():
    # reference: the peak of the 2^18-point spectrum (0.1 Hz at 24 kHz), the
    # grid the templates' rings are read on
    scan = _TemplateScan(48000.0, 2, 24000.0)
    rng = np.random.default_rng(5)
    t = np.arange(scan.L) / scan.fs_d
    decided = []
    for _ in range(300):
        main_hz = rng.uniform(400.0, 6000.0)
        scan.slots[0][1] = main_hz
        f1 = main_hz * np.exp(rng.uniform(-0.12, 0.12))  # around the 8 % bar
        h = np.exp(-t / rng.uniform(0.002, 0.012)) * np.sin(2 * np.pi * f1 * t)
        h += rng.uniform(0.0, 0.8) * np.exp(-t / 0.004) * np.sin(2 * np.pi * 2.08 * f1 * t)
        h += 0.05 * rng.standard_normal(t.size)
        fine = abs(np.log(scan._peak_hz(h) / main_hz)) < 0.08
        assert scan._rings_like_main(h) == fine
        decided.append(fine)
    assert 0 < sum(decided) < len(decided)  # both answers were asked


def test_clipped_count_equals_numpy_count():
    # reference: numpy's count of |x| >= 0.9999 after numpy.nan_to_num, over every block
    rng = np.random.default_rng(12)
    det = ClickDetector(48000.0, template_scan=False)
    expected = 0
    for size in (1, 500, 4096, 3, 20000):
        x = (rng.uniform(-1.001, 1.001, size)).astype(np.float32)
        x[rng.integers(0, size, max(1, size // 50))] = np.float32(0.9999)
        if size > 3:
            x[rng.integers(0, size, 3)] = [np.nan, np.inf, -np.inf]
        clean = np.nan_to_num(x, nan=0.0, posinf=1.0, neginf=-1.0)
        expected += int(np.count_nonzero(np.abs(clean) >= np.float32(0.9999)))
        det.process(x)
        assert det.clipped_samples == expected
    assert expected > 0


def test_span_windows_are_the_stream_with_zeros_outside():
    # reference: the stream's kept samples zero-padded with numpy.pad, sliced directly
    rng = np.random.default_rng(13)
    det = ClickDetector(48000.0, template_scan=False)
    x = rng.standard_normal(30000).astype(np.float32) * 0.01
    det.process(x)
    kept_from = det._x0
    assert 0 < kept_from < x.size - 1000  # (some samples dropped, some kept)
    n = 700
    padded = np.pad(x[kept_from:], 2 * n)
    for starts in ([kept_from + 5, kept_from + 100], [kept_from - 50, kept_from + 10],
                   [x.size - 100, kept_from + 1], [kept_from - n - 3, x.size + 2]):
        starts = np.array(starts, dtype=np.int64)
        buf, at = det._span(starts, n)
        want = np.array([padded[s - kept_from + 2 * n:][:n] for s in starts.tolist()])
        assert np.array_equal(_rows(buf, at, n), want)


def test_with_neighbours_equals_numpy_roll():
    # reference: numpy.roll one bin each way (circular)
    rng = np.random.default_rng(14)
    for n in (0, 1, 2, 3, 5, 81):
        for _ in range(50):
            sel = rng.random(n) < rng.uniform(0.0, 0.5)
            want = sel | np.roll(sel, 1) | np.roll(sel, -1)
            got = _with_neighbours(sel)
            assert np.array_equal(got, want)
            assert got is not sel


def test_click_share_weight_keeps_the_click_and_drops_the_echo():
    # a folded window holding a 4 kHz click and a 1.2 kHz echo that was there
    # before the click too: the Wiener gain max(0, 1 - off/on) (Wiener 1949;
    # from memory) keeps the first and removes the second
    from popmeter.detection import _click_share_filtered

    fs = 24000.0
    n = 288
    t = np.arange(n) / fs
    click = np.sin(2 * np.pi * 4000.0 * t) * np.exp(-t / 0.002)
    echo = 0.8 * np.sin(2 * np.pi * 1200.0 * t + 0.3)
    h = click + echo
    m = 200
    f = np.arange(m // 2 + 1) * fs / m
    off = np.where(np.abs(f - 1200.0) < 400.0, 1.0, 1e-3)  # the echo before the click
    on = off + np.where(np.abs(f - 4000.0) < 1500.0, 1.0, 0.0)  # and the click with it
    out = _click_share_filtered(h, fs, f, on, off)
    fr = np.fft.rfftfreq(4096, 1.0 / fs)

    def click_over_echo(x):
        spec = np.abs(np.fft.rfft(x, 4096))
        return spec[np.abs(fr - 4000.0) < 150.0].max() / spec[np.abs(fr - 1200.0) < 150.0].max()

    assert click_over_echo(h) < 1.0  # (the echo dominates the window)
    assert click_over_echo(out) > 10.0 * click_over_echo(h)
    assert abs(np.linalg.norm(out) - 1.0) < 1e-9 and abs(out.mean()) < 1e-12
    # where nothing was there before, the template is unchanged (up to its norm)
    same = _click_share_filtered(click, fs, f, on, np.full_like(on, 1e-12))
    ref = (click - click.mean()) / np.linalg.norm(click - click.mean())
    assert np.corrcoef(same, ref)[0, 1] > 0.999


def test_octave_about_keeps_one_plate_mode_and_drops_its_neighbours():
    # a template holding a clamped circle's first two modes, 1200 Hz and 2.081
    # x 1200 Hz (Leissa, NASA SP-160, Table 2.1), the first one 3 times as
    # strong: the octave about the second keeps it, unchanged up to its norm
    # (a zero-phase real gain of 1 at a sinusoid's frequency passes the
    # sinusoid as it is), and drops the first, more than half an octave away
    from popmeter.detection import _octave_about

    fs = 24000.0
    t = np.arange(288) / fs
    f1, f2 = 1200.0, 2.081 * 1200.0
    second = np.sin(2 * np.pi * f2 * t) * np.exp(-t / 0.004)
    h = 3.0 * np.sin(2 * np.pi * f1 * t) * np.exp(-t / 0.008) + second
    out = _octave_about(h, fs, f2)
    ref = (second - second.mean()) / np.linalg.norm(second - second.mean())
    # (0.978: the decay widens the line, and the abrupt start spreads over
    # every frequency, so the gain is not exactly 1 over all of it)
    assert np.corrcoef(out, ref)[0, 1] > 0.95
    assert np.corrcoef(h, ref)[0, 1] < 0.5  # (before: the first mode dominates)
    assert abs(np.linalg.norm(out) - 1.0) < 1e-9 and abs(out.mean()) < 1e-12
    # the gain, read as amplitude ratios (the output is normalised): a tone at
    # the centre and one about a quarter octave off come out 1 : cos^2(pi x
    # their distance in octaves), about 1 : 0.5; one 0.55 octave off is gone
    # (long Hann-windowed tones on exact DFT bins: no scalloping)
    n = 8192
    tt = np.arange(n) / fs
    win = np.hanning(n)
    fr = np.fft.rfftfreq(n, 1.0 / fs)

    def on_bin(f):
        return fr[np.argmin(np.abs(fr - f))]

    def amp(x, f):
        return np.abs(np.fft.rfft(x * win))[np.argmin(np.abs(fr - f))]

    fc = on_bin(f2)
    for off_oct in (0.25, -0.25, 0.55, -0.7):
        f_off = on_bin(fc * 2 ** off_oct)
        dist = math.log2(f_off / fc)
        want = math.cos(math.pi * dist) ** 2 if abs(dist) < 0.5 else 0.0
        tones = np.sin(2 * np.pi * fc * tt) + np.sin(2 * np.pi * f_off * tt)
        got = _octave_about(tones, fs, fc)
        assert amp(got, f_off) / amp(got, fc) == pytest.approx(want, abs=0.01)


def test_fold_band_energies_started_late_are_those_of_filters_run_from_the_start():
    # the fold bands are filtered only from the moment the main template
    # forms, from the kept buffer's start with the filters at rest; what a
    # fold reads (from E + L past that start) must be what the same filters
    # run over the whole stream give.  Reference: scipy.signal.sosfilt over
    # the whole decimated stream in one call
    from scipy import signal

    scan = _TemplateScan(48000.0, 2, 24000.0)
    rng = np.random.default_rng(21)
    fed = []
    for size in [24000 * 7] * 6:  # 42 s of decimated noise with louder bursts
        d = (0.01 * rng.standard_normal(size)).astype(np.float32)
        d[rng.integers(0, size - 300, 20)[:, None] + np.arange(300)] *= 30.0
        fed.append(d)
        scan.feed(d)
        scan.advance(scan.n * scan.q, final=False)  # (chunks with no template: given up)
    assert scan._band_e is None  # no main template yet: no band filtered
    assert scan.b0 > 24000  # the buffer no longer starts at the stream's start
    scan._start_bands()
    tail = (0.01 * rng.standard_normal(24000 * 3)).astype(np.float32)
    fed.append(tail)
    scan.feed(tail)
    whole = np.concatenate(fed)
    skip = scan.E + scan.L
    for sos, got in zip(scan._fold_bands, scan._band_e):
        ref = (signal.sosfilt(sos, whole) ** 2).astype(np.float32)[scan.b0:]
        assert got.size == ref.size
        np.testing.assert_allclose(got[skip:], ref[skip:], rtol=1e-6,
                                   atol=1e-6 * float(ref.max()))
        # (at rest at the start, the first samples differ: the check can fail)
        assert not np.allclose(got[:8], ref[:8], rtol=1e-6, atol=1e-6 * float(ref.max()))


def test_unlike_main_equals_numpy_correlate_one_window_at_a_time():
    # the batched likeness test of the second family's candidates against the
    # per-click form (reference: numpy.correlate and numpy.convolve, one
    # window at a time): each window's mean removed, the correlation at every
    # shift over the energy of the same L samples, unlike under 0.55
    scan = _TemplateScan(48000.0, 2, 24000.0)
    L, A = scan.L, scan.A
    rng = np.random.default_rng(7)
    t = np.arange(L) / 24000.0
    h = np.exp(-t / 0.003) * np.sin(2 * np.pi * 2500.0 * t)
    h -= h.mean()
    h /= np.linalg.norm(h)
    scan.slots[0][2] = h
    rows = []
    for i in range(40):  # the template at various shifts and noise levels, and noise alone
        w = 0.05 * rng.standard_normal(L + 2 * A)
        if i % 4:
            s = int(rng.integers(0, 2 * A + 1))
            w[s:s + L] += (i % 7) * 0.05 * h / np.abs(h).max()
        rows.append(w + 0.3)  # (an offset: the mean is removed)
    ex = np.array(rows)
    got = scan._unlike_main(ex)
    ref = []
    for w in ex:
        e = w - w.mean()
        c = np.correlate(e, h, "valid") / (np.sqrt(np.convolve(e * e, np.ones(L), "valid"))
                                           + 1e-20)
        ref.append(float(np.max(np.abs(c))) < 0.55)
    assert got.tolist() == ref
    assert 5 < sum(ref) < 35  # both answers occur: the check can fail


@pytest.mark.parametrize("wins, n", [(0, 0), (0, 5), (9, 11), (12, 12), (17, 22), (12, 16),
                                     (74, 134), (30, 70), (600, 1100), (1500, 2600)])
def test_sign_test_equals_scipy_binomtest(wins, n):
    # reference: scipy.stats.binomtest, one-sided ("greater"), p = 1/2
    from scipy.stats import binomtest

    got = _sign_test_p(wins, n)
    ref = 1.0 if n == 0 else binomtest(wins, n, 0.5, alternative="greater").pvalue
    assert got == pytest.approx(ref, rel=1e-12)


def test_unseen_equals_the_distance_to_every_time():
    # reference: the smallest distance to every one of the times, by brute force
    rng = np.random.default_rng(11)
    for n_t, n_f in [(0, 5), (1, 7), (50, 200), (300, 40)]:
        times = np.sort(rng.uniform(0.0, 3.0, n_t))
        found = rng.uniform(-0.1, 3.1, n_f)
        if n_t:  # (a quarter of them close to a time, on either side of 10 ms)
            k = n_f // 4
            found[:k] = rng.choice(times, k) + rng.uniform(-0.012, 0.012, k)
        expected = np.array([n_t == 0 or np.min(np.abs(times - t)) >= 0.010 for t in found])
        assert np.array_equal(_unseen(times, found), expected)


def test_whole_cycles_keeps_one_and_two_period_intervals():
    # main clicks 1000 samples apart (fs 48 kHz: 48 cycles a second), one
    # missed (an interval of two periods, split at its middle) and one
    # interval split by a stray click (450 + 550: neither is a whole cycle)
    mains = np.array([0, 1000, 2000, 4000, 5000, 5450, 6000, 7000, 8000, 9000, 10000, 11000])
    st, lengths = _whole_cycles(mains, 48000.0)
    assert st.tolist() == [0, 1000, 2000, 3000, 4000, 6000, 7000, 8000, 9000, 10000]
    assert lengths.tolist() == [1000.0] * 10
    assert st.dtype == np.int64
    # cycles over 0.5 s are no engine's: none at 1 s a cycle
    assert _whole_cycles(np.arange(0, 20 * 48000, 48000), 48000.0)[0].size == 0
    assert _whole_cycles(np.array([5]), 48000.0)[0].size == 0
