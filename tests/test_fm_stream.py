"""The streaming pieces of dsp.fm behind the FM engine, each against a reference outside
the project: the carrier's phase line against numpy.unwrap and numpy.polyfit, the droop
equaliser against scipy.signal.freqz and the sinc of the first difference, the
demodulator's seek against a demodulator fed from the start, and every running sum that
parts of a recording are joined by (BS.412 windows, the deviation histogram, the averaged
spectrum, the I/Q statistics) against one instance fed the whole stream or against
numpy/scipy computed on it whole.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
import scipy.signal as ssig
from hypothesis import given, settings
from hypothesis import strategies as st

from dsp.fm import (
    DeviationHistogram,
    FmDemodulator,
    ModulationPowerMeter,
    modulation_power_dbr,
    phase_line,
)
from dsp.iq import IqStatistics, iq_health
from dsp.spectrum import SpectrumAverager

FS = 48000


def _fm(fs, seconds, carrier, dev, tone, kind, cnr_db, seed=1):
    """Single-tone FM with white noise giving cnr_db in a 10 kHz bandwidth (numpy)."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(fs * seconds)) / fs
    ph = 2 * np.pi * carrier * t + (dev / tone) * np.sin(2 * np.pi * tone * t + 0.3)
    s = math.sqrt(0.25 / 10 ** (cnr_db / 10) / 10000.0 * fs / 2)
    if kind == "real":
        return 0.5 * np.cos(ph) + s * rng.standard_normal(t.size)
    return 0.5 * np.exp(1j * ph) + s * (
        rng.standard_normal(t.size) + 1j * rng.standard_normal(t.size)
    )


def _reference_line(z, fs):
    """The carrier's line the slow way: numpy.unwrap of numpy.angle, fitted by polyfit."""
    ph = np.unwrap(np.angle(z))
    t = (np.arange(z.size) - (z.size - 1) / 2.0) / fs
    slope, mean = np.polyfit(t, ph, 1)
    return slope / (2 * np.pi), mean


class TestPhaseLine:
    @pytest.mark.parametrize(
        ("kind", "fs", "carrier", "dev", "cnr"),
        [
            ("real", FS, 9000.3, 0.0, 90.0),  # a clean beat note: the counter's case
            ("real", FS, 9000.3, 3000.0, 30.0),  # noisy FM
            ("complex", 192000, -3000.7, 0.0, 120.0),  # a very clean I/Q carrier
            ("complex", 192000, 30000.1, 5000.0, 30.0),
        ],
    )
    def test_equals_unwrap_and_polyfit(self, kind, fs, carrier, dev, cnr):
        # Reference: numpy.unwrap(numpy.angle(baseband)) fitted by numpy.polyfit. The
        # float32 discriminator's drift is taken out by the exact anchors: the two agree
        # far inside the stated uncertainty, gate after gate (the mixer's phase and the
        # history carried across calls).
        x = _fm(fs, 3.0, carrier + 7.0, dev, 1000.0, kind, cnr)
        dm = FmDemodulator(fs, carrier, 10000.0, kind=kind, oversample=1.2)
        for g in range(3):
            block = dm.process_block(x[g * fs : (g + 1) * fs])
            line = phase_line(block)
            f_ref, ph_ref = _reference_line(block.baseband(), block.fs_out_hz)
            assert abs(line.offset_hz - f_ref) <= 0.2 * line.sigma_offset_hz + 1e-12
            assert abs(line.phase_rad - ph_ref) <= 0.2 * line.sigma_phase_rad + 1e-12
            assert line.offset_hz == pytest.approx(7.0, abs=5 * line.sigma_offset_hz + 1e-9)
            assert line.n_samples == block.n_baseband
            assert line.t_center_s == pytest.approx((block.n_baseband - 1) / 2 / dm.fs_out_hz)

    def test_uncertainty_matches_the_scatter(self):
        # The stated sigma (white phase noise from the envelope's variance) against the
        # scatter of offsets over 40 independent noisy gates of a steady carrier.
        x = _fm(FS, 40.0, 9000.0, 0.0, 1000.0, "real", 40.0, seed=5)
        dm = FmDemodulator(FS, 9000.0, 10000.0, oversample=1.2)
        lines = [phase_line(dm.process_block(x[g * FS : (g + 1) * FS])) for g in range(40)]
        offsets = np.array([ln.offset_hz for ln in lines[1:]])
        sigma = np.mean([ln.sigma_offset_hz for ln in lines[1:]])
        # chi-square bounds for 39 samples (scipy.stats): the ratio lies within 0.6-1.5
        assert 0.6 < np.std(offsets, ddof=1) / sigma < 1.5

    def test_needs_two_samples(self):
        dm = FmDemodulator(FS, 9000.0, 10000.0)
        with pytest.raises(ValueError, match="at least 2"):
            phase_line(dm.process_block(np.zeros(10)))


class TestDroopEqualiser:
    @pytest.mark.parametrize(("fs_out_band", "tol"), [(0.25, 1e-4), (0.3125, 2e-4), (0.39, 1e-3)])
    def test_response_against_freqz(self, fs_out_band, tol):
        # Reference: the equaliser's taps through scipy.signal.freqz, times the first
        # difference's droop sinc(f / fs_out) (numpy.sinc; the phase difference averages
        # the frequency over one output sample [computed]). The net response is 1 within
        # tol over the band, exactly 1 at DC, and droop_response says so.
        dm = FmDemodulator(FS, 9000.0, 8000.0, oversample=1.2, droop_band_hz=1.0)
        fs_out = dm.fs_out_hz
        dm = FmDemodulator(FS, 9000.0, 8000.0, oversample=1.2, droop_band_hz=fs_out_band * fs_out)
        f = np.linspace(0.0, fs_out_band * fs_out, 200)
        _, h = ssig.freqz(dm._eq, worN=f, fs=fs_out)
        net = np.abs(h) * np.sinc(f / fs_out)
        assert np.max(np.abs(net - 1.0)) <= tol
        assert net[0] == pytest.approx(1.0, abs=1e-12)
        np.testing.assert_allclose(dm.droop_response(f), net, atol=1e-12)
        assert float(dm.droop_response(1234.5)) == pytest.approx(
            float(dm.droop_response(np.array([1234.5]))[0]), abs=1e-15
        )

    @pytest.mark.parametrize("fs", [44100.0, 48000.0, 100000.0, 192000.0, 240000.0, 2.4e6])
    def test_output_rate_keeps_the_band_flat(self, fs):
        # A 15 kHz audio band behind a narrow 16 kHz I/Q IF: the output rate the IF and
        # a 2.2 x 15 kHz floor would allow (fs / 3 = 33.3 kHz at 100 kHz in) puts the band
        # at 0.45 fs_out, where 11 taps leave 0.7%; the demodulator takes a rate that
        # keeps it within 0.4 fs_out instead. Reference as above: scipy.signal.freqz of
        # the taps times numpy.sinc, 20 Hz to 15 kHz within 1.3e-3.
        dm = FmDemodulator(
            fs, 20000.0, 16000.0, kind="complex", oversample=1.2, min_fs_out_hz=33000.0,
            droop_band_hz=15000.0,
        )  # fmt: skip
        assert dm.droop_band_hz == 15000.0 <= 0.4 * dm.fs_out_hz
        f = np.linspace(20.0, 15000.0, 300)
        _, h = ssig.freqz(dm._eq, worN=f, fs=dm.fs_out_hz)
        assert np.max(np.abs(np.abs(h) * np.sinc(f / dm.fs_out_hz) - 1.0)) <= 1.3e-3

    @pytest.mark.parametrize("tone", [300.0, 1000.0, 2000.0, 2900.0])
    def test_deviation_flat_at_a_low_output_rate(self, tone):
        # At 12 kHz out (1.2 x a 10 kHz IF) a 2.9 kHz tone loses 5% to the first
        # difference's droop; equalised up to 3 kHz the tone's deviation (a least-squares
        # fit at the tone, numpy.linalg.lstsq) reads within 0.05% of the generator's at
        # every tone, and the output follows it sample by sample. (Small deviation: the
        # sidebands beyond the 10 kHz IF band stay negligible.)
        x = _fm(FS, 2.0, 9000.0, 300.0, tone, "real", 200.0)
        dm = FmDemodulator(FS, 9000.0, 10000.0, oversample=1.2, droop_band_hz=3000.0)
        assert dm.fs_out_hz == pytest.approx(12000.0)
        f = dm.process(x)[2000:]
        t = dm.first_output_time_s + (2000 + np.arange(f.size)) / dm.fs_out_hz
        basis = np.stack([np.cos(2 * np.pi * tone * t), np.sin(2 * np.pi * tone * t)], 1)
        amp = np.hypot(*np.linalg.lstsq(basis, f, rcond=None)[0])
        assert amp == pytest.approx(300.0, rel=5e-4)
        ref = 300.0 * np.cos(2 * np.pi * tone * t + 0.3)
        assert np.max(np.abs(f - ref)) < 0.01 * 300.0
        if tone == 2900.0:  # the droop the equaliser took out
            assert np.sinc(tone / dm.fs_out_hz) < 0.95


class TestScale:
    @pytest.mark.parametrize("amplitude", [1e-13, 1e-8, 1e6, 1e14])
    def test_output_does_not_depend_on_level(self, amplitude):
        # The discriminator's float32 angle is kept in range whatever the input level:
        # the same FM at 1e-13 .. 1e14 gives the output of amplitude 1 (to the float32
        # angle's rounding, 1e-7 rad at 12 kHz).
        x = _fm(FS, 1.0, 9000.0, 2000.0, 1000.0, "real", 200.0)
        ref = FmDemodulator(FS, 9000.0, 10000.0, oversample=1.2).process(x)
        with np.errstate(all="raise"):
            got = FmDemodulator(FS, 9000.0, 10000.0, oversample=1.2).process(amplitude * x)
        assert np.max(np.abs(got - ref)) < 1e-2


class TestSeek:
    @pytest.mark.parametrize(
        ("kind", "fs", "carrier"), [("real", FS, 9000.0), ("complex", 192000, 30000.0)]
    )
    def test_seek_then_settle_equals_one_pass(self, kind, fs, carrier):
        # A demodulator that starts in the middle (seek, then settle_inputs samples fed
        # and discarded) gives the outputs, indices and baseband of one fed from the start.
        x = _fm(fs, 3.0, carrier, 3000.0, 1000.0, kind, 40.0)
        start = fs + 12345
        one = FmDemodulator(fs, carrier, 10000.0, kind=kind, oversample=1.2)
        one.process_block(x[:start])
        ref = one.process_block(x[start : start + fs])
        part = FmDemodulator(fs, carrier, 10000.0, kind=kind, oversample=1.2)
        pre = start - part.settle_inputs - 7
        part.seek(pre)
        part.process(x[pre:start])
        got = part.process_block(x[start : start + fs])
        assert got.start_index == ref.start_index
        np.testing.assert_allclose(got.inst_hz, ref.inst_hz, rtol=0, atol=1e-8)
        np.testing.assert_allclose(got.baseband(), ref.baseband(), rtol=0, atol=1e-12)
        assert phase_line(got).offset_hz == pytest.approx(phase_line(ref).offset_hz, abs=1e-9)

    @settings(max_examples=25, deadline=None)
    @given(st.lists(st.integers(0, 20000), min_size=1, max_size=8))
    def test_outputs_for_counts_what_is_given(self, sizes):
        # outputs_for(m) is the number of outputs a fresh demodulator gives for m inputs,
        # whatever the split into calls
        dm = FmDemodulator(FS, 9000.0, 10000.0, oversample=1.2)
        x = np.cos(2 * np.pi * 9000.0 * np.arange(sum(sizes)) / FS)
        pos = 0
        for n in sizes:
            dm.process(x[pos : pos + n])
            pos += n
            assert dm.samples_out == dm.outputs_for(pos)

    def test_seek_rejects_negative(self):
        with pytest.raises(ValueError, match="n_input=-1"):
            FmDemodulator(FS, 9000.0, 10000.0).seek(-1)


def _splits(n, cuts):
    edges = sorted({0, n, *[min(n, c) for c in cuts]})
    return list(itertools.pairwise(edges))


def _sliding_power_reference(x, measured, fs, window_s, origin=0):
    """BS.412 power the brute-force way (numpy cumsum over the samples): the largest mean
    square of the measured samples over all intervals of W = round(window_s * fs) samples
    starting on floor(k W / K) (K = min(60, W): a step of 1/60 window from clock index 0)
    at or after `origin` and ending by the end of x (x[0] is at clock index origin).
    Returns (mean square, number of intervals holding measured samples)."""
    w = max(1, round(window_s * fs))
    k = min(60, w)
    starts = np.arange(0, (origin + x.size) * k // w + 2) * w // k
    starts = starts[(starts >= origin) & (starts + w <= origin + x.size)] - origin
    sq = np.where(measured, x, 0.0) ** 2
    cs = np.concatenate([[0.0], np.cumsum(sq)])
    cn = np.concatenate([[0], np.cumsum(measured)])
    s, n = cs[starts + w] - cs[starts], cn[starts + w] - cn[starts]
    held = n > 0
    return float((s[held] / n[held]).max()), int(held.sum())


class TestPowerMeterParts:
    @settings(max_examples=40, deadline=None)
    @given(
        st.lists(st.integers(0, 3000), max_size=4),
        st.integers(0, 300),
        st.sampled_from([60.0, 61.3]),
    )
    def test_parts_merge_to_one_meter(self, cuts, skip, window_s):
        # 3000 samples at 10 Hz, 60 s windows of 600 samples (BS.412's 60 s on a slow
        # clock; 61.3 s: 613 samples, steps of 10 and 11 samples): a meter per
        # part, started at its clock index (anywhere, not on a step) and merged in order,
        # gives exactly what one meter fed everything gives; the first `skip` samples are
        # stepped over (a filter settling) in both.
        rng = np.random.default_rng(len(cuts) + skip)
        x = 1000.0 * rng.standard_normal(3000) * np.repeat(rng.uniform(0.2, 2.0, 30), 100)
        one = ModulationPowerMeter(10.0, window_s=window_s)
        one.skip(skip)
        one.update(x[skip:])
        joined = None
        for a, b in _splits(3000, [skip, *cuts]):
            m = ModulationPowerMeter(10.0, window_s=window_s, start_index=a)
            if b <= skip:
                m.skip(b - a)
            else:
                m.update(x[a:b])
            if joined is None:
                joined = m
            else:
                joined.merge(m)
        r1, r2 = one.result(), joined.result()
        assert r2.n_windows == r1.n_windows
        assert r2.whole_record == r1.whole_record
        assert r2.power_dbr == pytest.approx(r1.power_dbr, abs=1e-9)
        ms, held = _sliding_power_reference(x, np.arange(3000) >= skip, 10.0, window_s)
        assert r1.n_windows == held
        assert r1.power_dbr == pytest.approx(modulation_power_dbr(ms), abs=1e-9)

    @pytest.mark.parametrize("window_s", [60.0, 61.3, 3.0])
    @pytest.mark.parametrize("origin", [0, 7])
    def test_sliding_windows_against_numpy(self, window_s, origin):
        # The maximum over all windows starting on a step, recomputed by brute force with
        # numpy (_sliding_power_reference), in dBr re the mean square of a 19 kHz sine
        # (ITU-R BS.412); fed in uneven chunks with stretches skipped in the middle, and
        # started off a step (origin 7: the first window starts at the next step, 10).
        rng = np.random.default_rng(2)
        x = np.concatenate([5000.0 * rng.standard_normal(700), 9000.0 * rng.standard_normal(1300)])
        measured = np.ones(x.size, bool)
        measured[850:990] = measured[1500:1503] = False
        m = ModulationPowerMeter(10.0, window_s=window_s, start_index=origin)
        edges = [0, 1, 333, 850, 990, 1234, 1500, 1503, 1999, 2000]
        for a, b in itertools.pairwise(edges):
            if measured[a]:
                m.update(x[a:b])
            else:
                m.skip(b - a)
        ms, held = _sliding_power_reference(x, measured, 10.0, window_s, origin)
        r = m.result()
        assert r.power_dbr == pytest.approx(modulation_power_dbr(ms), abs=1e-9)
        assert r.n_windows == held and not r.whole_record
        assert m.step_s == pytest.approx(window_s / 60 if window_s > 6 else 0.1, rel=1e-3)

    def test_skipped_samples_weigh_nothing(self):
        # Skipped samples move the clock but add nothing: a window's power is the mean
        # square of the samples it holds (numpy), not diluted by the skipped ones; windows
        # holding nothing are not windows, and with none left the whole record counts.
        m = ModulationPowerMeter(10.0)
        m.skip(1000)
        m.update(np.full(300, 100.0))
        m.skip(700)
        r = m.result()
        assert r.power_dbr == pytest.approx(modulation_power_dbr(1e4), abs=1e-12)
        assert not r.whole_record and r.n_windows == 89  # starts 410, 420, ..., 1290
        m = ModulationPowerMeter(10.0)
        m.update(np.full(300, 100.0))
        m.skip(299)
        r = m.result()
        assert r.whole_record and r.n_windows == 0
        assert r.window_s == pytest.approx(30.0)

    def test_bad_input_leaves_the_meter_alone(self):
        m = ModulationPowerMeter(10.0)
        m.update(np.full(50, 100.0))
        with pytest.raises(ValueError, match="finite"):
            m.update(np.array([1.0, np.nan]))
        assert m.result().power_dbr == pytest.approx(modulation_power_dbr(1e4), abs=1e-12)

    def test_merge_checks_the_clock(self):
        a = ModulationPowerMeter(10.0)
        a.update(np.ones(100))
        with pytest.raises(ValueError, match="starts at sample 50"):
            a.merge(ModulationPowerMeter(10.0, start_index=50))
        with pytest.raises(ValueError, match="start_index=-1"):
            ModulationPowerMeter(10.0, start_index=-1)
        with pytest.raises(ValueError, match="window lengths differ"):
            a.merge(ModulationPowerMeter(10.0, window_s=30.0, start_index=100))


class TestHistogramParts:
    @settings(max_examples=30, deadline=None)
    @given(st.integers(0, 20000), st.floats(1.0, 5e4))
    def test_merged_counts_equal_one_histogram(self, cut, spread):
        # Two parts (the second much wider, so its bins widen on their own) merged: the
        # same width and counts as one histogram fed both, count for count; the
        # exceedances then agree exactly, and they lie within a bin of the order
        # statistics (numpy.sort) that bracket the level. (Not numpy.quantile to a bin:
        # in a sparse tail two neighbouring samples can lie several bins apart, and
        # quantile conventions differ by one sample there; a seed found it.)
        rng = np.random.default_rng(cut)
        x = np.concatenate([300.0 * rng.standard_normal(cut), spread * rng.standard_normal(20000)])
        one = DeviationHistogram(1.0, max_bins=4096)
        one.update(x)
        a, b = DeviationHistogram(1.0, max_bins=4096), DeviationHistogram(1.0, max_bins=4096)
        a.update(x[:cut])
        b.update(x[cut:])
        a.merge(b)
        assert a.bin_hz == one.bin_hz
        assert a.to_dict() == one.to_dict()
        mags = np.sort(np.abs(x))
        for q in (0.1, 0.01):
            level = a.exceeded_hz(q)
            assert level == one.exceeded_hz(q)
            # q*n samples lie above the level: it falls between the samples ranked
            # n - q*n - 1 and n - q*n + 1 (one sample of slack for either convention),
            # give or take a bin
            k = mags.size - q * mags.size
            lo, hi = mags[int(np.floor(k)) - 2], mags[min(int(np.ceil(k)) + 1, mags.size - 1)]
            assert lo - one.bin_hz <= level <= hi + one.bin_hz

    def test_widths_not_exact_in_binary(self):
        # a base width of 0.3 Hz (not a binary fraction): bins are merged by index, so
        # the merged histogram is still one histogram's, count for count
        rng = np.random.default_rng(11)
        x = np.concatenate([5.0 * rng.standard_normal(3000), 900.0 * rng.standard_normal(3000)])
        one = DeviationHistogram(0.3, max_bins=512)
        one.update(x)
        a, b = DeviationHistogram(0.3, max_bins=512), DeviationHistogram(0.3, max_bins=512)
        a.update(x[:3000])
        b.update(x[3000:])
        a.merge(b)
        assert a.to_dict() == one.to_dict()

    def test_merge_into_empty_and_from_empty(self):
        a, b = DeviationHistogram(1.0), DeviationHistogram(1.0)
        b.update(np.array([1.5, -2.5, 7.0]))
        a.merge(b)
        a.merge(DeviationHistogram(1.0))
        assert a.to_dict() == b.to_dict()


class TestSpectrumParts:
    def test_weights_against_numpy(self):
        # Two segments weighted 1/2 each and one weighted 1: the weighted mean of the
        # periodograms, recomputed with scipy.signal.periodogram (the same window and
        # scaling as scipy.signal.welch, scaling="spectrum").
        rng = np.random.default_rng(3)
        z = rng.standard_normal(3 * 256) + 1j * rng.standard_normal(3 * 256)
        avg = SpectrumAverager(1000.0, 256, kind="complex", overlap=0.0, window="hann")
        avg.update(z[:512], weight=0.5)
        avg.update(z[512:])
        win = ssig.get_window("hann", 256)
        pg = [
            ssig.periodogram(
                z[i : i + 256],
                1000.0,
                window=win,
                detrend=False,
                return_onesided=False,
                scaling="spectrum",
            )[1]
            for i in (0, 256, 512)
        ]
        want = np.fft.fftshift((0.5 * pg[0] + 0.5 * pg[1] + pg[2]) / 2.0)
        np.testing.assert_allclose(avg.result().power, want, rtol=1e-10)
        assert avg.averages == 3

    def test_merge_equals_one(self):
        rng = np.random.default_rng(4)
        x = rng.standard_normal(4096)
        one = SpectrumAverager(8000.0, 512, overlap=0.0)
        one.update(x)
        a, b = (
            SpectrumAverager(8000.0, 512, overlap=0.0),
            SpectrumAverager(8000.0, 512, overlap=0.0),
        )
        a.update(x[:2048])
        b.update(x[2048:])
        a.merge(b)
        np.testing.assert_allclose(a.result().power, one.result().power, rtol=1e-12)
        with pytest.raises(ValueError, match="different"):
            a.merge(SpectrumAverager(8000.0, 256))
        with pytest.raises(ValueError, match="weight=0"):
            a.update(x, weight=0.0)


class TestIqStatistics:
    def test_pooled_gates_equal_the_whole(self):
        # Gates of different lengths pooled (and two poolings merged) give iq_health of
        # all the samples at once, to rounding, offsets and imbalance included.
        rng = np.random.default_rng(6)
        n = 50000
        t = np.arange(n) / 48000.0
        z0 = np.exp(2j * np.pi * 3000.0 * t) + 0.05 * (
            rng.standard_normal(n) + 1j * rng.standard_normal(n)
        )
        g, phi = 10 ** (1.0 / 20), math.radians(3.0)
        z = (z0.real + 0.02) + 1j * (g * (math.sin(phi) * z0.real + math.cos(phi) * z0.imag) - 0.01)
        whole = iq_health(z)
        a, b = IqStatistics(), IqStatistics()
        edges = [0, 7000, 20000, 31000, 50000]
        for lo, hi in itertools.pairwise(edges):
            (a if lo < 20000 else b).add(iq_health(z[lo:hi]))
        a.merge(b)
        got = a.result()
        for k in ("dc_i", "dc_q", "gain_imbalance_db", "phase_imbalance_deg", "image_rejection_db"):
            assert getattr(got, k) == pytest.approx(getattr(whole, k), rel=1e-9, abs=1e-12), k
        assert got.n_samples == n
        # and the imbalance put in (common practice: the blind second-order estimate)
        assert got.gain_imbalance_db == pytest.approx(1.0, abs=0.02)
        assert got.phase_imbalance_deg == pytest.approx(3.0, abs=0.2)

    def test_empty(self):
        with pytest.raises(ValueError, match="no gates"):
            IqStatistics().result()


class TestFftPaths:
    def test_direct_and_public_agree(self, monkeypatch):
        # dsp._fft calls pocketfft directly when it matches scipy.fft at import, and
        # scipy.fft itself otherwise: both paths give scipy.fft's transforms.
        import scipy.fft as sfft

        from dsp import _fft

        rng = np.random.default_rng(9)
        x = rng.standard_normal(3840)
        z = rng.standard_normal(3840) + 1j * rng.standard_normal(3840)
        for direct in (True, False):
            if not direct:
                monkeypatch.setattr(_fft, "_PP", None)
            np.testing.assert_allclose(_fft.rfft(x), sfft.rfft(x), rtol=1e-12, atol=1e-9)
            out = np.empty(1921, dtype=np.complex128)
            assert _fft.rfft(x, out=out) is out
            np.testing.assert_allclose(_fft.fft(z.copy()), sfft.fft(z), rtol=1e-12, atol=1e-9)
            w = z.copy()
            assert _fft.ifft(w, out=w) is w
            np.testing.assert_allclose(w, sfft.ifft(z), rtol=1e-12, atol=1e-12)
