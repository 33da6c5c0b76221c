"""Stability computations (dsp.stability) against NIST SP 1065, allantools, scipy and
closed forms."""

from __future__ import annotations

import math

import allantools
import numpy as np
import pytest
from scipy import stats

from dsp.stability import (
    NOISE_SLOPES,
    StabilityTracker,
    allan_family,
    analyze_stability,
    check_readings,
    drift_rate_curve,
    fit_drift,
    fractional_frequency,
    lag1_noise_alpha,
    noise_hint,
    octave_factors,
    warmup_time,
)

# NIST SP 1065 (Riley 2008), pp. 107-108 [seen, via shared/guide/references.md].
NIST9 = np.array([892, 809, 823, 798, 671, 644, 883, 903, 677], dtype=float)


def nist1000() -> np.ndarray:
    # NIST SP 1065 1000-point set: n0 = 1234567890, n(i+1) = 16807 n(i) mod 2^31-1.
    n = [1234567890]
    for _ in range(999):
        n.append(16807 * n[-1] % 2147483647)
    return np.array(n, dtype=float) / 2147483647


def rel(a, b) -> float:
    return abs(a - b) / abs(b)


class TestFractionalFrequency:
    def test_definition(self):
        # y = f/f0 - 1 (IEEE Std 1139 definition of fractional frequency)
        assert fractional_frequency([10e6 + 1.0], 10e6)[0] == pytest.approx(1e-7, rel=1e-9)

    def test_raises(self):
        with pytest.raises(ValueError, match="nominal_hz=0"):
            fractional_frequency([1.0], 0)


class TestCheckReadings:
    def test_regular(self):
        c = check_readings(np.arange(100) * 0.5, np.full(100, 1e3))
        assert c.tau0_s == 0.5
        assert c.gap_count == 0 and c.segments == ((0, 100),) and c.warnings == ()

    def test_gap_and_missing(self):
        t = np.concatenate([np.arange(50.0), np.arange(60.0, 100.0)])
        f = np.full(t.size, 1e3)
        f[10] = np.nan
        c = check_readings(t, f)
        # one reading without frequency (t=10) and an 11 s interval (49 -> 60, readings
        # 50..59 lost): 1 + 10 readings missing
        assert c.missing_count == 1
        assert c.gap_count == 2
        assert c.segments == ((0, 10), (10, 49), (49, 89))
        assert c.skipped_estimate == 11
        assert any("no frequency" in w for w in c.warnings)
        assert any("gaps" in w and "interpolated" in w for w in c.warnings)

    def test_jitter(self):
        t = np.arange(200.0)
        t[1::2] += 0.05
        c = check_readings(t, np.ones(200), tau0_s=1.0)
        assert c.jitter_fraction == pytest.approx(0.05, abs=1e-9)
        assert any("irregular" in w for w in c.warnings)

    def test_known_breaks(self):
        b = np.zeros(20, bool)
        b[7] = True
        c = check_readings(np.arange(20.0), np.ones(20), breaks_before=b)
        assert c.segments == ((0, 7), (7, 20))

    def test_raises(self):
        with pytest.raises(ValueError, match="same length"):
            check_readings([0, 1, 2], [1, 2])
        with pytest.raises(ValueError, match="strictly increasing"):
            check_readings([0, 2, 1], [1, 1, 1])
        with pytest.raises(ValueError, match="at least 2"):
            check_readings([0, 1], [1, np.nan])
        with pytest.raises(ValueError, match="tau0_s=-1"):
            check_readings([0, 1], [1, 1], tau0_s=-1)


class TestFitDrift:
    def test_against_scipy(self, rng):
        # Reference: scipy.stats.linregress and numpy.polyfit on the same readings.
        t = np.arange(0.0, 86400.0, 10.0)
        f = 100e6 + 0.02 * t - 3e-8 * t**2 + 0.05 * rng.standard_normal(t.size)
        d = fit_drift(t, f, nominal_hz=100e6)
        lr = stats.linregress(t, f)
        assert d.hz_per_s == pytest.approx(lr.slope, rel=1e-9)
        assert d.ppm_per_min == pytest.approx(lr.slope * 60 / 100e6 * 1e6, rel=1e-9)
        c2 = np.polyfit(t - t.mean(), f - 100e6, 2)
        assert d.quadratic_hz_per_s2 == pytest.approx(c2[0], rel=1e-7)
        assert d.quadratic_hz_per_s2 == pytest.approx(-3e-8, rel=0.01)
        assert d.excursion_hz == pytest.approx(f.max() - f.min())
        # rate of the parabola at the ends: b + 2 c t
        assert d.quadratic_start_hz_per_s == pytest.approx(0.02, rel=1e-3)
        assert d.quadratic_end_hz_per_s == pytest.approx(0.02 - 6e-8 * t[-1], rel=1e-3)

    def test_raises(self):
        with pytest.raises(ValueError, match="at least 3"):
            fit_drift([0, 1], [1, 1])
        with pytest.raises(ValueError, match="nominal_hz=-5"):
            fit_drift([0, 1, 2], [1, 1, 1], nominal_hz=-5)


class TestDriftRateCurve:
    def test_window_slopes_match_direct_fits(self, rng):
        # Reference: scipy.stats.linregress over the readings inside each window.
        t = np.sort(rng.uniform(0, 1000, 3000))
        f = 1e3 + 1e-3 * np.sin(t / 100) + 1e-5 * rng.standard_normal(t.size)
        c = drift_rate_curve(t, f, window_s=80.0)
        b = 10.0
        for j in (0, 17, 50, 90):
            lo = t[0] + j * b
            sel = (t >= lo) & (t < lo + 80.0)
            # bins are half-open on the first reading's grid, as the window
            ref = stats.linregress(t[sel], f[sel]).slope
            assert c.hz_per_s[j] == pytest.approx(ref, rel=1e-6)
            assert c.t_s[j] == pytest.approx(t[sel].mean(), abs=1e-9)

    def test_gap_gives_nan(self):
        t = np.concatenate([np.arange(0.0, 100.0), np.arange(300.0, 400.0)])
        c = drift_rate_curve(t, np.ones(t.size), window_s=40.0)
        mid = (c.t_s > 130) & (c.t_s < 270)
        assert np.all(np.isnan(c.hz_per_s[mid]))

    def test_raises(self):
        with pytest.raises(ValueError, match="window_s=0"):
            drift_rate_curve([0, 1, 2], [1, 1, 1], window_s=0)


class TestWarmupTime:
    def test_exponential_closed_form(self):
        # f = f_inf + A exp(-t/T): |df/dt| = (A/T) exp(-t/T); a window fit of width W
        # sees it times h(a) = 3(a cosh a - sinh a)/a^3, a = W/(2T) (integral of x e^-x
        # over a symmetric window). Below r (ppm/min) from t_w = T ln(A h 60e6 / (T f0 r)).
        f0, amp, tau, thr, w = 10e6, 20.0, 120.0, 0.1, 20.0
        t = np.arange(0.0, 1800.0, 1.0)
        f = f0 + amp * np.exp(-t / tau)
        res = warmup_time(t, f, threshold_ppm_per_min=thr, window_s=w, nominal_hz=f0)
        a = w / (2 * tau)
        h = 3 * (a * math.cosh(a) - math.sinh(a)) / a**3
        expected = tau * math.log(amp * h * 60e6 / (tau * f0 * thr))
        assert res.warmup_s == pytest.approx(expected, abs=0.05)

    def test_exponential_with_noise(self, rng):
        f0, amp, tau, thr = 1e3, 0.05, 300.0, 1.0
        t = np.arange(0.0, 3600.0, 1.0)
        f = f0 + amp * np.exp(-t / tau) + 1e-6 * rng.standard_normal(t.size)
        res = warmup_time(t, f, threshold_ppm_per_min=thr, window_s=60.0, nominal_hz=f0)
        a = 60.0 / (2 * tau)
        h = 3 * (a * math.cosh(a) - math.sinh(a)) / a**3
        expected = tau * math.log(amp * h * 60e6 / (tau * f0 * thr))
        assert res.warmup_s == pytest.approx(expected, abs=2.0)

    def test_never_settles(self):
        t = np.arange(0.0, 600.0)
        res = warmup_time(t, 1e3 + 1e-3 * t, threshold_ppm_per_min=1.0, nominal_hz=1e3)
        # 1e-3 Hz/s on 1 kHz = 60 ppm/min throughout
        assert res.warmup_s is None
        assert res.final_ppm_per_min == pytest.approx(60.0, rel=1e-6)

    def test_raises(self):
        with pytest.raises(ValueError, match="threshold_ppm_per_min=0"):
            warmup_time([0, 1, 2], [1, 1, 1], threshold_ppm_per_min=0)


class TestOctaveFactors:
    def test_limits(self):
        assert list(octave_factors(9)) == [1, 2, 4]
        assert list(octave_factors(9, kind="mdev")) == [1, 2]
        assert octave_factors(1).size == 0


class TestAllanFamily:
    def test_nist_9_point(self):
        # NIST SP 1065 pp. 107-108: ADEV(1)=91.22945, ADEV(2)=115.8082,
        # OADEV(2)=85.95287, MDEV(2)=74.78849; 1e-6 relative.
        c = allan_family(NIST9, 1.0, factors=[1, 2])
        assert rel(c["adev"].values[0], 91.22945) < 1e-6
        assert rel(c["adev"].values[1], 115.8082) < 1e-6
        assert rel(c["oadev"].values[1], 85.95287) < 1e-6
        assert rel(c["mdev"].values[1], 74.78849) < 1e-6

    def test_nist_1000_point(self):
        # NIST SP 1065 1000-point set, tau = 1, 10, 100; 1e-6 relative.
        c = allan_family(nist1000(), 1.0, factors=[1, 10, 100])
        for got, want in zip(c["adev"].values, (0.2922319, 0.09965736, 0.03897804), strict=True):
            assert rel(got, want) < 1e-6
        for got, want in zip(c["oadev"].values, (0.2922319, 0.09159953, 0.03241343), strict=True):
            assert rel(got, want) < 1e-6
        for got, want in zip(c["mdev"].values, (0.2922319, 0.06172376, 0.02170921), strict=True):
            assert rel(got, want) < 1e-6

    def test_tdev_is_tau_mdev_over_sqrt3(self):
        # NIST SP 1065 eq. (15): TDEV = tau * MDEV / sqrt(3); cross-check with allantools.
        y = nist1000()
        c = allan_family(y, 2.0, factors=[1, 4, 16])
        _taus, td, _, _ = allantools.tdev(y, rate=0.5, data_type="freq", taus=[2.0, 8.0, 32.0])
        np.testing.assert_allclose(c["tdev"].values, td, rtol=1e-12)

    def test_gaps_pooled_not_bridged(self, rng):
        # Independent numpy computation of the pooled overlapping Allan variance: squared
        # second differences of phase within each segment, summed, / (2 tau^2 count).
        y = rng.standard_normal(700)
        segs = [(0, 300), (300, 700)]
        c = allan_family(y, 1.0, segments=segs, factors=[1, 4, 16])
        for m, got in zip((1, 4, 16), c["oadev"].values, strict=True):
            num, cnt = 0.0, 0
            for a, b in segs:
                x = np.concatenate([[0.0], np.cumsum(y[a:b])])
                d = x[2 * m :] - 2 * x[m:-m] + x[: -2 * m]
                num += float(np.sum(d**2))
                cnt += d.size
            assert got == pytest.approx(math.sqrt(num / (2 * m * m * cnt)), rel=1e-10)
        # and not the same as bridging the gap (one series)
        whole = allan_family(y, 1.0, factors=[16])["oadev"].values[0]
        assert whole != pytest.approx(c["oadev"].values[2], rel=1e-6)

    def test_confidence_interval_matches_allantools(self, rng):
        # Reference: allantools.edf_greenhall + confidence_interval (NIST SP 1065 eq. 45).
        y = rng.standard_normal(2000)  # white FM, alpha = 0
        c = allan_family(y, 1.0, factors=[1, 8, 64])
        for i, m in enumerate((1, 8, 64)):
            assert c["oadev"].alpha[i] == 0
            edf = allantools.edf_greenhall(0, 2, m, 2001, overlapping=True, modified=False)
            lo, hi = allantools.confidence_interval(c["oadev"].values[i], edf)
            assert c["oadev"].lower[i] == pytest.approx(lo, rel=1e-9)
            assert c["oadev"].upper[i] == pytest.approx(hi, rel=1e-9)
            assert lo < c["oadev"].values[i] < hi

    def test_raises(self):
        with pytest.raises(ValueError, match="tau0_s=0"):
            allan_family([1.0, 2.0, 3.0], 0)
        with pytest.raises(ValueError, match=r"confidence=1\.5"):
            allan_family([1.0, 2.0, 3.0], 1.0, confidence=1.5)
        with pytest.raises(ValueError, match="finite"):
            allan_family([1.0, np.nan, 3.0], 1.0)
        with pytest.raises(ValueError, match="segment"):
            allan_family([1.0, 2.0, 3.0], 1.0, segments=[(0, 9)])
        with pytest.raises(ValueError, match="no tau"):
            allan_family([1.0], 1.0, factors=[1])


class TestLag1NoiseAlpha:
    @pytest.mark.parametrize("kind", ["white PM", "white FM", "random-walk FM"])
    def test_matches_allantools(self, rng, kind):
        # Reference: allantools.autocorr_noise_id (Riley & Greenhall 2004 lag-1 method).
        w = rng.standard_normal(4001)
        y = {"white PM": np.diff(w), "white FM": w[:4000], "random-walk FM": np.cumsum(w)}[kind]
        for m in (1, 4, 16):
            ref = allantools.autocorr_noise_id(y, m, data_type="freq")[0]
            assert lag1_noise_alpha(y, m) == ref
        expected = {"white PM": 2, "white FM": 0, "random-walk FM": -2}[kind]
        assert lag1_noise_alpha(y, 1) == expected  # NIST SP 1065 Table 5 [memory]

    def test_raises(self):
        with pytest.raises(ValueError, match="30 averages"):
            lag1_noise_alpha(np.ones(50), 4)


def _curves(y, tau0=1.0):
    c = allan_family(y, tau0)
    return c["oadev"], c["mdev"]


class TestNoiseHint:
    # Published slopes: NIST SP 1065 section 5.2.1, Table 5 [memory, as listed in
    # shared/guide/references.md]. Monte-Carlo bound: seeded, 8192 readings, +/-0.1 on the
    # fitted slope (the spread of the fit over octave taus is about 0.03 at this length).
    N = 8192

    def test_white_pm(self, rng):
        x = rng.standard_normal(self.N + 1)
        hint = noise_hint(*_curves(np.diff(x)))
        assert hint.adev_slope == pytest.approx(NOISE_SLOPES["white PM"][0], abs=0.1)
        assert hint.mdev_slope == pytest.approx(NOISE_SLOPES["white PM"][1], abs=0.1)
        assert hint.noise_type == "white PM"

    def test_white_fm(self, rng):
        hint = noise_hint(*_curves(rng.standard_normal(self.N)))
        assert hint.adev_slope == pytest.approx(-0.5, abs=0.1)
        assert hint.noise_type == "white FM"

    def test_random_walk_fm(self, rng):
        hint = noise_hint(*_curves(np.cumsum(rng.standard_normal(self.N))))
        assert hint.adev_slope == pytest.approx(0.5, abs=0.1)
        assert hint.noise_type == "random-walk FM"

    def test_linear_drift(self, rng):
        # A drift D gives sigma_y(tau) = D tau / sqrt(2) (NIST SP 1065 section 5.2.1).
        d = 1e-9
        t = np.arange(self.N, dtype=float)
        y = d * t + 1e-12 * rng.standard_normal(self.N)
        a, m = _curves(y)
        hint = noise_hint(a, m, drift_per_s=d)
        assert hint.adev_slope == pytest.approx(1.0, abs=0.1)
        assert hint.noise_type == "linear drift"
        assert "drift explains it" in hint.explanation
        assert a.values[-1] == pytest.approx(d * a.taus_s[-1] / math.sqrt(2), rel=0.02)

    def test_too_few_taus(self):
        a, m = _curves(np.array([1.0, 2.0, 1.5]))
        assert noise_hint(a, m).noise_type == "unknown"


class TestAnalyzeStability:
    def test_settled_and_span(self, rng):
        t = np.arange(0.0, 3600.0)
        f = 1e6 + 2.0 * np.exp(-t / 200) + 1e-6 * rng.standard_normal(t.size)
        kw = {"nominal_hz": 1e6, "settle_ppm_per_min": 0.01}
        r_all = analyze_stability(t, f, **kw)
        r_set = analyze_stability(t, f, select="settled", **kw)
        # 0.6 ppm/min at t=0 falls to 0.01 ppm/min near 200 s * ln(60) = 819 s
        assert r_all.warmup.warmup_s == pytest.approx(200 * math.log(60), rel=0.05)
        assert r_set.span_s[0] >= r_all.warmup.settled_at_t_s
        assert r_set.adev.values[-1] < r_all.adev.values[-1]
        r_span = analyze_stability(t, f, select="span", span_s=(1000, 2000), **kw)
        assert r_span.span_s == (1000.0, 2000.0)
        # drift of the span: scipy.stats.linregress on the readings in it
        sel = (t >= 1000) & (t <= 2000)
        ref = stats.linregress(t[sel], f[sel]).slope
        assert r_span.span_drift.hz_per_s == pytest.approx(ref, rel=1e-9)
        assert r_span.check.count == 3600

    def test_remove_drift(self, rng):
        t = np.arange(4096.0)
        f = 1e6 * (1 + 1e-9 * t + 1e-10 * rng.standard_normal(t.size))
        kept = analyze_stability(t, f, nominal_hz=1e6)
        gone = analyze_stability(t, f, nominal_hz=1e6, remove_drift=True)
        assert kept.noise.noise_type == "linear drift"
        assert gone.noise.noise_type == "white FM"

    def test_raises(self):
        t = np.arange(100.0)
        with pytest.raises(ValueError, match="select="):
            analyze_stability(t, np.ones(100), select="middle")
        with pytest.raises(ValueError, match="span_s="):
            analyze_stability(t, np.ones(100), select="span", span_s=(5, 1))
        with pytest.raises(ValueError, match="never stays below"):
            analyze_stability(t, 1e3 + 1e-2 * t, select="settled")
        with pytest.raises(ValueError, match="holds 0 readings"):
            analyze_stability(t, np.ones(100), select="span", span_s=(500, 600))


class TestStabilityTracker:
    def _stream(self, rng):
        n = 6000
        t = np.arange(n) * 0.5
        y = 1e-9 * rng.standard_normal(n) + 1e-12 * np.cumsum(rng.standard_normal(n))
        f = 1e6 * (1 + y) + 1e-5 * t
        f[1000:1004] = np.nan  # missing readings
        keep = np.ones(n, bool)
        keep[3000:3100] = False  # a 50 s hole
        return t[keep], f[keep]

    def test_matches_batch_in_chunks(self, rng):
        # Reference: allan_family (itself checked against NIST SP 1065 and allantools) on
        # the same readings and segments; readings fed in random chunk sizes.
        t, f = self._stream(rng)
        tr = StabilityTracker(tau0_s=0.5, nominal_hz=1e6)
        i = 0
        while i < t.size:
            k = int(rng.integers(1, 300))
            tr.extend(t[i : i + k], f[i : i + k])
            i += k
        ok = np.isfinite(f)
        segs = check_readings(t, f).segments
        ref = allan_family(f[ok] / 1e6 - 1, 0.5, segments=segs)
        got = tr.curves()
        for kind in ("oadev", "mdev", "tdev"):
            assert got[kind].taus_s == ref[kind].taus_s
            assert got[kind].n_terms == ref[kind].n_terms
            np.testing.assert_allclose(got[kind].values, ref[kind].values, rtol=1e-8)
        assert tr.count == int(ok.sum())
        # drift: scipy.stats.linregress on the usable readings
        assert tr.drift_hz_per_s() == pytest.approx(stats.linregress(t[ok], f[ok]).slope, rel=1e-9)
        assert tr.drift_ppm_per_min() == pytest.approx(tr.drift_hz_per_s() * 60, rel=1e-12)

    def test_intervals_white_fm(self, rng):
        # Reference: allantools.edf_greenhall (alpha = 0) + confidence_interval.
        tr = StabilityTracker(tau0_s=1.0, nominal_hz=1e3)
        tr.extend(np.arange(1000.0), 1e3 * (1 + 1e-8 * rng.standard_normal(1000)))
        c = tr.curves()["oadev"]
        edf = allantools.edf_greenhall(0, 2, 4, 1001, overlapping=True, modified=False)
        lo, hi = allantools.confidence_interval(c.values[2], edf)
        assert (c.lower[2], c.upper[2]) == pytest.approx((lo, hi), rel=1e-9)

    def test_raises(self):
        with pytest.raises(ValueError, match="tau0_s=0"):
            StabilityTracker(tau0_s=0, nominal_hz=1e3)
        tr = StabilityTracker(tau0_s=1.0, nominal_hz=1e3)
        tr.extend([0.0, 1.0], [1e3, 1e3])
        with pytest.raises(ValueError, match="after the last reading"):
            tr.extend([1.0], [1e3])
