"""Harmonic ladder, inference of the fundamental and the protected-band table
(dsp.harmonics), on worked numbers and against brute force and numpy least squares."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

from dsp.harmonics import (
    PROTECTED_BANDS,
    harmonic_ladder,
    infer_fundamental,
    protected_band_hits,
    protected_harmonics,
)


def names(hits) -> set[str]:
    return {h.name for h in hits}


AERO = "aeronautical radionavigation and mobile (R) band 108-137 MHz"
EMERG = "aeronautical emergency 121.5 MHz"
MIL = "military aeronautical emergency and survival craft 243 MHz"
CH16 = "maritime distress, safety and calling 156.8 MHz (VHF channel 16)"
BEACON = "satellite distress beacons 406-406.1 MHz"


class TestBandTable:
    def test_spot_checks(self):
        # ITU Radio Regulations, Article 5 and Appendix 15 [memory], as listed in
        # shared/guide/references.md: 108-137 MHz aeronautical, 121.5 and 243 MHz
        # emergency, 156.8 MHz maritime distress, 406-406.1 MHz beacons.
        table = {b.name: (b.lo_hz, b.hi_hz) for b in PROTECTED_BANDS}
        assert table[AERO] == (108e6, 137e6)
        assert table[EMERG] == (121.5e6, 121.5e6)
        assert table[MIL] == (243e6, 243e6)
        assert table[CH16] == (156.8e6, 156.8e6)
        assert table[BEACON] == (406.0e6, 406.1e6)
        assert all("[memory]" in b.source and not b.verified for b in PROTECTED_BANDS)


class TestProtectedBandHits:
    def test_on_121_5(self):
        assert names(protected_band_hits(121.5e6)) == {AERO, EMERG}

    def test_band_edges_with_carson_width(self):
        # Carson's rule (Federal Standard 1037C): occupied half-width = deviation + fm.
        assert protected_band_hits(107.9e6, 0, audio_hz=15e3) == ()
        # 107.99 MHz + 75 kHz + 15 kHz reaches past 108 MHz
        assert names(protected_band_hits(107.99e6, 75e3, audio_hz=15e3)) == {AERO}
        assert protected_band_hits(107.99e6, 0, audio_hz=0) == ()
        assert protected_band_hits(98.1e6, 75e3) == ()

    def test_spot_guard(self):
        # guard 12.5 kHz (half a 25 kHz channel) around a spot frequency
        assert EMERG in names(protected_band_hits(121.51e6, 0, audio_hz=0))
        assert EMERG not in names(protected_band_hits(121.52e6, 0, audio_hz=0))
        assert EMERG in names(protected_band_hits(121.52e6, 0, audio_hz=10e3))
        assert names(protected_band_hits(156.8e6)) == {CH16}
        assert names(protected_band_hits(243.005e6, 0, audio_hz=0)) == {MIL}
        assert names(protected_band_hits(406.05e6)) == {BEACON}

    def test_distance(self):
        hit = next(h for h in protected_band_hits(121.51e6, 0, audio_hz=0) if h.name == EMERG)
        assert hit.distance_hz == pytest.approx(10e3)

    def test_raises(self):
        with pytest.raises(ValueError, match="frequency_hz=-1"):
            protected_band_hits(-1)
        with pytest.raises(ValueError, match="deviation_hz=nan"):
            protected_band_hits(1e8, math.nan)
        with pytest.raises(TypeError, match="frequency_hz must be a number"):
            protected_band_hits("100M")


class TestHarmonicLadder:
    def test_worked_fm_band(self):
        # 33.4 MHz: 3 x 33.4 = 100.2 MHz is the only harmonic in 88-108 MHz (arithmetic).
        lines = harmonic_ladder(33.4e6, deviation_hz=25e3, target_deviation_hz=75e3)
        assert [x.n for x in lines] == [3]
        assert lines[0].frequency_hz == pytest.approx(100.2e6)
        assert lines[0].deviation_hz == pytest.approx(75e3)  # FM deviation multiplies by N
        assert lines[0].fundamental_deviation_for_target_hz == pytest.approx(25e3)
        assert lines[0].protected == ()

    def test_brute_force_count(self):
        # every N with 88e6 <= N*f0 <= 108e6, by a direct loop
        f0 = 1.234567e6
        want = [n for n in range(1, 200) if 88e6 <= n * f0 <= 108e6]
        assert [x.n for x in harmonic_ladder(f0)] == want

    def test_lands_on_121_5(self):
        # 40.5 MHz x 3 = 121.5 MHz (emergency), x 6 = 243 MHz (military emergency)
        lines = {x.n: x for x in harmonic_ladder(40.5e6, lo_hz=100e6, hi_hz=250e6)}
        assert names(lines[3].protected) == {AERO, EMERG}
        assert names(lines[6].protected) == {MIL}
        assert lines[4].protected == () and lines[5].protected == ()

    def test_raises(self):
        with pytest.raises(ValueError, match="fundamental_hz=0"):
            harmonic_ladder(0)
        with pytest.raises(ValueError, match="must not exceed"):
            harmonic_ladder(1e6, lo_hz=2e8, hi_hz=1e8)
        with pytest.raises(ValueError, match="narrow the range"):
            harmonic_ladder(1.0, lo_hz=0, hi_hz=1e9)


class TestProtectedHarmonics:
    def test_40_5_mhz(self):
        got = {p.band: p.harmonics for p in protected_harmonics(40.5e6, deviation_hz=25e3)}
        assert got == {AERO: (3,), EMERG: (3,), MIL: (6,)}

    def test_matches_per_harmonic_check(self):
        # brute force: protected_band_hits on every harmonic up to 1 GHz
        f0, dev = 7.3e6, 5e3
        want: dict[str, list[int]] = {}
        for n in range(1, int(1e9 // f0) + 1):
            for h in protected_band_hits(n * f0, n * dev):
                want.setdefault(h.name, []).append(n)
        got = {p.band: list(p.harmonics) for p in protected_harmonics(f0, deviation_hz=dev)}
        assert got == want

    def test_count_100_khz(self):
        # 100 kHz steps across 108-137 MHz: N = 1080..1370, 291 harmonics (arithmetic;
        # 1079 x 100 kHz = 107.9 MHz stays clear with 15 kHz audio)
        aero = next(p for p in protected_harmonics(100e3) if p.band == AERO)
        assert aero.count == 291 and aero.harmonics[0] == 1080 and aero.harmonics[-1] == 1370

    def test_raises(self):
        with pytest.raises(ValueError, match="max_hz=0"):
            protected_harmonics(1e6, max_hz=0)


def brute_force(heard, tol, fmin, n_max):
    """Every harmonic-number set that fits, by direct enumeration of small N."""
    f = np.asarray(heard)
    f_lo = f.min()
    sols = set()
    for ns in itertools.product(range(1, n_max + 1), repeat=len(f)):
        n = np.asarray(ns)
        lo = max(np.max((f - tol) / n), fmin)
        hi = min(np.min((f + tol) / n), f_lo + tol)
        if lo <= hi:
            sols.add(ns)
    return sols


class TestInferFundamental:
    def test_worked_numbers(self):
        # 100.2 MHz = 3 x 33.4 MHz and 133.6 MHz = 4 x 33.4 MHz (arithmetic)
        r = infer_fundamental([100.2e6, 133.6e6], tolerance_hz=2e3)
        best = r.candidates[0]
        assert best.fundamental_hz == pytest.approx(33.4e6, abs=1e-3)
        assert best.harmonics == (3, 4) and best.divisor == 1 and best.alias_of is None
        assert r.primitive_count == 1

    def test_least_squares_fundamental(self):
        # Reference: numpy.linalg.lstsq for f = N f0 with the same N.
        heard = [96.3012e6, 128.3992e6, 160.5005e6]  # 3, 4, 5 x 32.1 MHz, off by ~1 kHz
        r = infer_fundamental(heard, tolerance_hz=5e3)
        best = r.candidates[0]
        assert best.harmonics == (3, 4, 5)
        n = np.array(best.harmonics, float)[:, None]
        f0 = np.linalg.lstsq(n, np.array(heard), rcond=None)[0][0]
        assert best.fundamental_hz == pytest.approx(f0, rel=1e-12)
        resid = np.array(heard) - n[:, 0] * f0
        assert best.residual_hz == pytest.approx(np.sqrt(np.mean(resid**2)), rel=1e-9)

    def test_sub_multiples_listed_after(self):
        r = infer_fundamental([100.2e6, 133.6e6], tolerance_hz=2e3, max_candidates=5)
        fs = [c.fundamental_hz for c in r.candidates]
        # f0/k with k*N fits exactly as well (k = 2..5 here), ranked after the primitive
        assert fs == pytest.approx([33.4e6 / k for k in range(1, 6)])
        assert [c.divisor for c in r.candidates] == [1, 2, 3, 4, 5]
        assert all(c.alias_of == 1 for c in r.candidates[1:])
        assert r.candidates[1].harmonics == (6, 8)
        # down to 100 kHz: floor(33.4e6 / 100e3) = 334 solutions in all
        assert r.total_count == 334 and r.omitted_count == 329
        assert "f0/2" in r.explanation

    def test_ambiguous(self):
        # A loose tolerance (1 MHz) admits several primitive answers; all are listed,
        # largest fundamental first, and the set equals a brute-force enumeration.
        heard, tol, fmin = [100e6, 134e6], 0.9e6, 5e6
        r = infer_fundamental(heard, tolerance_hz=tol, min_fundamental_hz=fmin, max_candidates=500)
        got = {c.harmonics for c in r.candidates}
        assert got == brute_force(heard, tol, fmin, 30)
        prim = [c for c in r.candidates if c.divisor == 1]
        assert len(prim) > 1 and prim[0].harmonics == (3, 4)
        assert [c.fundamental_hz for c in prim] == sorted(
            (c.fundamental_hz for c in prim), reverse=True
        )
        assert "too wide to decide" in r.explanation
        for c in r.candidates:
            assert c.max_error_hz <= tol * (1 + 1e-12)

    def test_nothing_fits(self):
        # 100.0, 101.7, 150.3 MHz: no f0 >= 1 MHz puts harmonics within 200 Hz of all
        # three (brute force over every N up to 151 agrees).
        heard = [100.0e6, 101.7e6, 150.3e6]
        r = infer_fundamental(heard, tolerance_hz=200, min_fundamental_hz=1e6)
        assert r.candidates == () and r.total_count == 0
        assert "No fundamental" in r.explanation
        f = np.array(heard)
        for n1 in range(1, 101):
            f0 = f[0] / n1
            n = np.rint(f / f0)
            lo, hi = np.max((f - 200) / n), np.min((f + 200) / n)
            assert lo > hi

    def test_order_of_heard_kept(self):
        r = infer_fundamental([133.6e6, 100.2e6], tolerance_hz=2e3)
        assert r.candidates[0].harmonics == (4, 3)

    def test_raises(self):
        with pytest.raises(ValueError, match="at least two"):
            infer_fundamental([100e6], tolerance_hz=1e3)
        with pytest.raises(ValueError, match="tolerance_hz=0"):
            infer_fundamental([100e6, 120e6], tolerance_hz=0)
        with pytest.raises(ValueError, match="positive and finite"):
            infer_fundamental([100e6, -1], tolerance_hz=1e3)
        with pytest.raises(ValueError, match="raise min_fundamental_hz"):
            infer_fundamental([100e6, 120e6], tolerance_hz=1e3, min_fundamental_hz=1)
        with pytest.raises(TypeError, match="sequence of numbers"):
            infer_fundamental(["a", "b"], tolerance_hz=1e3)
