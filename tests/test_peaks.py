"""`vibsynth peaks` and vibsynth.peaks: largest peak, exceedances, crest factor; theory against Monte-Carlo.

External references used below:
- Davenport (1964), Proc. ICE 28: expected largest peak sqrt(2 ln N) + 0.5772 / sqrt(2 ln N) and its
  standard deviation (pi / sqrt 6) / sqrt(2 ln N), with N = 2 nu0 T crossings for |x|;
- Rice (1944/45): nu0 = sqrt(m2 / m0), here the closed form of the (invented) profile;
- Sheppard (1899): P(sign change) = arccos(rho) / pi; scipy.stats.multivariate_normal.cdf for the
  orthant probability P(X < v < Y) at a non-zero level;
- scipy.stats.norm for Gaussian tail probabilities; iid sampling of the transform for its tails;
- the Monte-Carlo of the synthesis pipeline itself, against the stated tolerance
  (vibsynth.peaks.PEAK_TOLERANCE_RELATIVE, EXCEEDANCE_TOLERANCE_RELATIVE).

The profile is an invented 20-1000 Hz breakpoint table.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import scipy.stats

from vibsynth.cli.main import main
from vibsynth import peaks
from vibsynth.transforms.choice import plan_transform
from vibsynth.profile.asd import AsdProfile

GENTLE = AsdProfile([20, 40, 600, 1000], [0.01, 0.04, 0.04, 0.01], name="invented gentle")
GENTLE_CSV = "frequency_hz,asd_g2_per_hz\n20,0.01\n40,0.04\n600,0.04\n1000,0.01\n"
EULER_GAMMA = 0.5772156649015329


def _davenport(n_crossings):
    root = math.sqrt(2.0 * math.log(n_crossings))
    return root + EULER_GAMMA / root, (math.pi / math.sqrt(6.0)) / root


def test_sampled_crossing_rate_against_sheppard_and_the_bivariate_normal():
    rho, rate = 0.6, 4096.0
    # level 0: Sheppard's arccos(rho) / (2 pi) up-crossings per sample
    assert peaks.sampled_crossing_rate_hz(0.0, rho, rate) == pytest.approx(rate * math.acos(rho) / (2 * math.pi),
                                                                           rel=1e-12)
    # level v: P(X < v < Y) = Phi(v) - Phi2(v, v; rho) (scipy.stats.multivariate_normal)
    for v in (1.0, 2.5, -1.5):
        joint = scipy.stats.multivariate_normal(mean=[0, 0], cov=[[1, rho], [rho, 1]]).cdf([v, v])
        expected = rate * (scipy.stats.norm.cdf(v) - joint)
        assert peaks.sampled_crossing_rate_hz(v, rho, rate) == pytest.approx(expected, rel=1e-5)
    # towards continuous time it tends to Rice's nu0 exp(-v^2/2) with rho1 = cos(2 pi nu0 / fs)
    nu0, fine = 500.0, 4096.0 * 64
    rho_fine = math.cos(2 * math.pi * nu0 / fine)
    assert peaks.sampled_crossing_rate_hz(3.0, rho_fine, fine) == pytest.approx(nu0 * math.exp(-4.5), rel=1e-3)


def test_gaussian_row_is_davenport_and_its_quantiles_follow_the_poisson_law():
    duration = 600.0
    row = peaks.peak_theory_row(GENTLE, GENTLE.evaluate(np.arange(4097) * 0.5), 0.5, 4096.0, duration)
    n = 2 * GENTLE.zero_upcrossing_rate_hz * duration
    mean, std = _davenport(n)
    assert row.continuous.mean_sigma == pytest.approx(mean, rel=1e-12)
    assert row.continuous.std_sigma == pytest.approx(std, rel=1e-12)
    # P(max <= a) = exp(-N exp(-a^2/2))  =>  a_p = sqrt(2 ln(N / -ln p))
    for p, value in ((0.05, row.continuous.p05_sigma), (0.95, row.continuous.p95_sigma)):
        assert value == pytest.approx(math.sqrt(2 * math.log(n / -math.log(p))), rel=2e-4)
    # the numerical integration of the same law agrees with Davenport's asymptotic mean within 1 %
    numeric = peaks.largest_peak_from_crossing_rate(
        lambda a: 2 * GENTLE.zero_upcrossing_rate_hz * np.exp(-0.5 * np.asarray(a) ** 2), duration)
    assert numeric.mean_sigma == pytest.approx(mean, rel=0.01)
    assert numeric.std_sigma == pytest.approx(std, rel=0.05)
    # Gaussian tails: 2 (1 - Phi(k))
    assert row.exceedance == pytest.approx(tuple(2 * scipy.stats.norm.sf(peaks.K_SIGMA_LEVELS)), rel=1e-10)


def test_transformed_exceedance_matches_iid_samples_of_the_transform():
    transform = plan_transform(skewness=0.5, kurtosis=4.0)
    row = peaks.peak_theory_row(GENTLE, GENTLE.evaluate(np.arange(4097) * 0.5), 0.5, 4096.0, 60.0, transform)
    y = transform.apply(np.random.default_rng(3).standard_normal(4_000_000))
    for k, p in zip(peaks.K_SIGMA_LEVELS[:5], row.exceedance[:5]):
        count = np.count_nonzero(np.abs(y) > k)
        assert count == pytest.approx(p * y.size, abs=4 * math.sqrt(p * y.size) + 1)


def _check_agreement(report):
    for row in report.rows:
        agreement = row.agreement()
        assert agreement["largest_peak"]["within"], (row.theory.label, agreement["largest_peak"])
        compared = [e for e in agreement["exceedance"] if e["compared"]]
        assert len(compared) >= 2, row.theory.label
        assert all(e["within"] for e in compared), (row.theory.label, compared)


@pytest.mark.parametrize("options", [dict(kurtosis=6.0), dict(skewness=0.5, kurtosis=4.0), dict(clip=2.5)])
def test_theory_agrees_with_its_own_monte_carlo_within_the_stated_tolerance(options):
    # 200 records of 5 s at 4096 Hz per row: the standard error of the mean largest peak is about 0.5 %
    seen = []
    report = peaks.peak_report(GENTLE, 5.0, 4096.0, transform=plan_transform(**options), records=200, seed=7,
                               progress=seen.append)
    assert sum(seen) == 2 * 200 * 5 * 4096
    _check_agreement(report)
    gaussian, transformed = report.rows
    mc = transformed.monte_carlo
    if "clip" in options:
        assert transformed.theory.sampled.mean_sigma == pytest.approx(options["clip"], rel=1e-9)
        assert np.max(mc.largest_peak_sigma) <= options["clip"] * (1 + 1e-9)
        assert transformed.theory.exceedance[2:] == (0.0, 0.0, 0.0, 0.0)
    else:
        assert np.mean(mc.kurtosis) == pytest.approx(options["kurtosis"], rel=0.05)
        # a leptokurtic drive's largest peak is well above the Gaussian one (Winterstein 1988)
        assert transformed.theory.sampled.mean_sigma > gaussian.theory.sampled.mean_sigma + 1.0


def test_the_sampling_correction_is_what_makes_theory_meet_the_monte_carlo():
    # At 2.56 x the top frequency the samples miss the continuous peaks by about 4 %: the continuous
    # (Davenport) value lies outside the tolerance, the sampled-sequence theory inside.
    report = peaks.peak_report(GENTLE, 5.0, 2560.0, records=200, seed=3)
    (row,) = report.rows
    measured = row.monte_carlo.largest_peak()
    allowed = row.agreement()["largest_peak"]["allowed_sigma"]
    assert abs(measured.mean_sigma - row.theory.sampled.mean_sigma) <= allowed
    assert abs(measured.mean_sigma - row.theory.continuous.mean_sigma) > allowed


def test_peaks_cli_table_and_json(tmp_path, capsys):
    profile = tmp_path / "gentle.csv"
    profile.write_text(GENTLE_CSV)
    status = main(["peaks", str(profile), "--duration", "5", "--rate", "4096", "--kurtosis", "6", "--records", "30"])
    out, err = capsys.readouterr()
    assert status == 0, err
    for text in ("largest |x|", "theory, continuous signal", "theory, 4096 Hz samples", "Monte-Carlo, 30 records",
                 "crest factor", "skewness 0, kurtosis 6", "within tolerance", "closed-loop controller"):
        assert text in out, text
    status = main(["peaks", str(profile), "--duration", "5", "--rate", "4096", "--clip", "3", "--records", "3",
                   "--json"])
    out, err = capsys.readouterr()
    assert status == 0, err
    data = json.loads(out)
    assert data["records"] == 3 and len(data["rows"]) == 2
    clip = data["rows"][1]
    assert clip["theory"]["crest_factor_limit"] == pytest.approx(3.0)
    assert clip["monte_carlo"]["largest_peak"]["mean_sigma"] == pytest.approx(3.0, rel=1e-6)
    assert [e["k_sigma"] for e in clip["theory"]["exceedance"]] == [1, 2, 3, 4, 5, 6]
    assert data["compensation"]["achievable"] is True


def test_peaks_cli_theory_only_refusals_and_runtime_warning(tmp_path, capsys, monkeypatch):
    profile = tmp_path / "gentle.csv"
    profile.write_text(GENTLE_CSV)
    assert main(["peaks", str(profile), "--duration", "3600", "--records", "0", "--kurtosis", "8"]) == 0
    out, _ = capsys.readouterr()
    assert "theory only" in out and "Monte-Carlo, " not in out
    assert main(["peaks", str(profile), "--duration", "60", "--kurtosis", "50"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "3 to 46.2" in err[0]
    import vibsynth.cli.peaks_cmd

    monkeypatch.setattr(vibsynth.cli.peaks_cmd, "MC_WARN_SAMPLES", 1000)
    assert main(["peaks", str(profile), "--duration", "5", "--records", "1"]) == 0
    err = capsys.readouterr().err
    assert "vibsynth: warning: the Monte-Carlo synthesizes" in err and "--records" in err
