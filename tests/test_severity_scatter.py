"""`vibsynth severity --records N`: the FDS/ERS scatter of synthesized records, checked against theory.

References used below (each named again beside its check value):
- J. W. Miles, "On structural fatigue under random loading", J. Aeronaut. Sci. 21(11), 753-762 (1954):
  narrow-band fatigue damage of a lightly damped oscillator, D = nu0 T (sqrt(2) sigma)^b Gamma(1 + b/2)
  (Rayleigh-distributed amplitudes, Miner's rule).
- S. O. Rice, "Mathematical analysis of random noise", Bell Syst. Tech. J. 23-24 (1944-45):
  zero up-crossing rate nu0 = sqrt(m2 / m0).
- A. G. Davenport, "Note on the distribution of the largest value of a random function with application
  to gust loading", Proc. Instn Civ. Engrs 28, 187-196 (1964): the expected largest peak and its
  standard deviation.
- The response moments are integrated here with scipy.integrate.quad over the band (not vibsynth's own
  closed forms); the oscillator's relative-displacement gain 1 / ((wn^2 - w^2)^2 + (2 zeta wn w)^2)
  (e.g. Thomson, "Theory of Vibration with Applications").
- ASTM E1049-85 (2017) rainflow counting and scipy.signal.lfilter in the independent recomputation
  (tests/independent/record_fds_check.py).
- scipy.stats for the summary statistics over the records.
- Dask LocalCluster (dask.distributed) runs the workers.

Every profile here is invented test data.
"""

from __future__ import annotations

import doctest
import importlib
import importlib.util
import json
import math
import sys
from pathlib import Path

import numpy as np
import pytest
import scipy.integrate
import scipy.stats
from scipy.special import gamma

from vibsynth.cli.main import main
from vibsynth.profile.asd import AsdProfile
from vibsynth.scatter import severity_scatter

G0 = 9.80665  # standard gravity, m/s^2 (CGPM 1901)
EULER_GAMMA = 0.5772156649015329  # Euler's constant (Davenport 1964 uses it in the expected largest peak)
FLAT_CSV = "frequency_hz,asd_g2_per_hz\n20,0.01\n2000,0.01\n"  # invented flat test profile, 4.45 g RMS
FLAT = AsdProfile([20.0, 2000.0], [0.01, 0.01], name="flat")


def _json(capsys, argv) -> dict:
    assert main(argv) == 0
    return json.loads(capsys.readouterr().out)


def _moments(fn_hz: float, q: float, low: float = 20.0, high: float = 2000.0, asd: float = 0.01):
    """m0 (m^2) and m2 (m^2 Hz^2) of the relative displacement under a flat base ASD, by quadrature."""
    wn = 2 * math.pi * fn_hz
    zeta = 1 / (2 * q)

    def gain(f):
        w = 2 * math.pi * f
        return asd * G0**2 / ((wn * wn - w * w) ** 2 + (2 * zeta * wn * w) ** 2)

    points = [fn_hz] if low < fn_hz < high else None
    m0 = scipy.integrate.quad(gain, low, high, points=points, limit=400, epsabs=0)[0]
    m2 = scipy.integrate.quad(lambda f: f * f * gain(f), low, high, points=points, limit=400, epsabs=0)[0]
    return m0, m2


def _flat_csv(tmp_path: Path) -> str:
    path = tmp_path / "flat.csv"
    path.write_text(FLAT_CSV)
    return str(path)


# ---------------------------------------------------------------------------------------- the engine
@pytest.mark.parametrize("name", ["vibsynth.montecarlo", "vibsynth.scatter"])
def test_docstring_examples_run(name):
    failures, tried = doctest.testmod(importlib.import_module(name), optionflags=doctest.ELLIPSIS)
    assert tried > 0 and failures == 0


def test_records_are_bit_identical_in_one_process_and_on_one_or_two_dask_workers(capsys):
    pytest.importorskip("distributed")
    # 8 s records at 20480 Hz: a plan large enough that Dask ships its arrays out of band, where they
    # can arrive misaligned (numpy then sums them with another rounding) unless packed in-band
    argv = ["severity", "bench-flat", "--duration", "60", "--records", "3", "--record-duration", "8",
            "--points", "4", "--json"]
    alone = _json(capsys, argv)
    one = _json(capsys, argv + ["--workers", "1"])
    two = _json(capsys, argv + ["--workers", "2"])
    assert one == alone and two == alone  # every record from its own spawn key: the same figures, to the last bit
    each = np.asarray(alone["fds_each_record"])
    assert each.shape == (3, 4) and np.all(each > 0)
    assert len({tuple(row) for row in each.tolist()}) == 3  # three different realizations
    assert alone["records"] == 3 and alone["record_seed"] == 0 and alone["record_damage_scale"] == 7.5
    assert alone["record_rate_hz"] == 20480.0  # 10 x the top natural frequency (2000 Hz), a common rate


def test_record_i_depends_only_on_i_and_the_summary_is_that_of_the_records(capsys, tmp_path):
    profile = _flat_csv(tmp_path)
    base = ["severity", profile, "--duration", "10", "--record-duration", "1", "--points", "3", "--fn-min", "100",
            "--fn-max", "400", "--json"]
    three = _json(capsys, base + ["--records", "3"])
    five = _json(capsys, base + ["--records", "5"])
    assert five["fds_each_record"][:3] == three["fds_each_record"]
    assert five["ers_each_record_g"][:3] == three["ers_each_record_g"]
    fds = np.asarray(five["fds_each_record"])
    ers = np.asarray(five["ers_each_record_g"])
    described = scipy.stats.describe(fds, axis=0)  # scipy.stats: mean and unbiased variance
    assert np.allclose(five["fds_records_mean"], described.mean, rtol=1e-12)
    assert np.allclose(five["fds_records_std"], np.sqrt(described.variance), rtol=1e-12)
    assert np.allclose(five["fds_records_min"], described.minmax[0], rtol=0)
    assert np.allclose(five["fds_records_max"], described.minmax[1], rtol=0)
    # scipy.stats.scoreatpercentile: linear interpolation between order statistics
    assert np.allclose(five["fds_records_p05"], scipy.stats.scoreatpercentile(fds, 5, axis=0), rtol=1e-12)
    assert np.allclose(five["ers_records_p95_g"], scipy.stats.scoreatpercentile(ers, 95, axis=0), rtol=1e-12)
    assert np.allclose(five["fds_records_mean_to_narrowband"],
                       np.asarray(five["fds_records_mean"]) / np.asarray(five["fds_narrowband"]), rtol=1e-12)
    # the ERS keys carry their unit; the FDS keys are in m^b like the other fds_* keys
    assert {"ers_records_mean_g", "ers_records_std_g", "ers_records_min_g", "ers_records_max_g",
            "ers_records_p05_g", "ers_records_expected_g", "ers_records_expected_std_g", "record_duration_s",
            "record_rate_hz"} <= set(five)


def test_text_tables_and_the_figures_gain_the_records_band(capsys, tmp_path):
    profile = _flat_csv(tmp_path)
    argv = ["severity", profile, "--duration", "60", "--record-duration", "1", "--points", "5", "--fn-min", "50",
            "--fn-max", "800"]
    assert main(argv + ["--report", str(tmp_path / "plain")]) == 0
    capsys.readouterr()
    assert main(argv + ["--records", "3", "--report", str(tmp_path / "band")]) == 0
    out = capsys.readouterr().out
    assert "3 records (fixed amplitudes) of 1 s at 8192 Hz" in out  # 10 x 800 Hz -> the next common rate
    assert "FDS of the records" in out and "ERS of the records" in out
    assert sum(1 for line in out.splitlines() if line.strip().startswith(("50 ", "800 "))) == 6
    import matplotlib.image

    for name in ("fds.png", "ers.png"):
        plain = matplotlib.image.imread(tmp_path / "plain" / name)
        band = matplotlib.image.imread(tmp_path / "band" / name)
        assert plain.shape == band.shape
        # the records' band is the drive colour #0b6e69 blended over the paper: a greenish pixel the
        # plain figure does not have (green channel above red by 0.05)
        greenish = lambda image: int(np.count_nonzero(image[..., 1] - image[..., 0] > 0.05))  # noqa: E731
        assert greenish(band) > 2000 and greenish(plain) < 200


@pytest.mark.parametrize("extra, needle", [
    (["--records", "1"], "--records"),
    (["--records", "2", "--record-rate", "3000"], "--record-rate"),  # below twice the top frequency (2000 Hz)
    (["--records", "2", "--fn-min", "500", "--fn-max", "1000", "--record-rate", "4096"], "--record-rate"),
    (["--records", "2", "--record-duration", "0.01"], "--record-duration"),
])
def test_bad_record_options_are_one_line_and_exit_2(extra, needle, capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    status = main(["severity", "bench-flat", "--duration", "60", "--points", "4"] + extra)
    err = capsys.readouterr().err.strip()
    assert status == 2 and needle in err and len(err.splitlines()) == 1, err
    assert not list(tmp_path.iterdir())


def test_without_dask_one_line_says_what_to_install(capsys, monkeypatch, tmp_path):
    monkeypatch.setitem(sys.modules, "distributed", None)  # `import distributed` raises ImportError
    status = main(["severity", _flat_csv(tmp_path), "--duration", "60", "--records", "2", "--workers", "2",
                   "--report", str(tmp_path / "rep")])
    lines = capsys.readouterr().err.strip().splitlines()
    assert status == 2 and len(lines) == 1 and "pip install 'vibsynth[cluster]'" in lines[0], lines
    assert not (tmp_path / "rep").exists()


# ---------------------------------------------------------------------------------------- against theory
@pytest.mark.slow
def test_mean_damage_of_the_records_approaches_the_narrowband_closed_form():
    """Lightly damped (Q = 50): the records' mean rainflow damage meets Miles' narrow-band damage.

    Measured (this configuration, 400 records instead of 160): mean / narrow band = 0.989 with a
    standard error of 0.008; with 160 records and seeds 1-6: 0.983 to 1.004 (standard errors 0.011 to
    0.012). The theory's own broadband correction (Dirlik / narrow band) is 0.989 here; the start from
    rest and the sampled peaks cost about 0.5 % (independent recomputation). Allowed: 3 standard errors
    of this run's records plus 2 % (those two effects, rounded up).
    """
    fn, q, b, length, records = 400.0, 50.0, 4.0, 8.0, 160
    scatter = severity_scatter(FLAT, length, records, fn_hz=[fn], q=q, b=b, record_rate_hz=5120.0, seed=5,
                               amplitude="rayleigh")  # rayleigh: true Gaussian realizations, as the theory assumes
    m0, m2 = _moments(fn, q)
    nu0 = math.sqrt(m2 / m0)  # Rice (1944): zero up-crossing rate
    assert nu0 == pytest.approx(fn, rel=0.01)  # a lightly damped oscillator responds at fn (Miles 1954)
    miles = nu0 * length * (2 * m0) ** (b / 2) * gamma(1 + b / 2)  # Miles (1954) narrow-band damage
    damage = scatter.fds[:, 0]
    ratio = float(np.mean(damage)) / miles
    standard_error = float(np.std(damage, ddof=1)) / math.sqrt(records) / miles
    print(f"mean / Miles = {ratio:.4f}, standard error {standard_error:.4f}")
    assert abs(ratio - 1) <= 3 * standard_error + 0.02, (ratio, standard_error)


@pytest.mark.slow
def test_largest_response_of_the_records_agrees_with_davenport():
    """Q = 10: the records' largest |z| against Davenport's expected largest peak and its spread.

    Davenport counts up-crossings as a Poisson stream; for a narrow-band response they come in clumps,
    so it overestimates a little. Measured with 800 records of 4 s (Gaussian realizations): mean /
    Davenport 0.963 (fn 200 Hz) and 0.978 (400 Hz); spread / Davenport's 1.08 and 1.09; with 160
    records and seeds 1-6: means 0.964 to 0.990, spreads 0.92 to 1.14. Allowed: 3 standard errors of
    this run plus 4 % for the mean; 3 standard errors of a standard deviation plus 10 % for the spread.
    """
    fn, q, length, records = np.array([200.0, 400.0]), 10.0, 4.0, 160
    scatter = severity_scatter(FLAT, length, records, fn_hz=fn, q=q, record_rate_hz=5120.0, seed=8,
                               amplitude="rayleigh")
    for index, f in enumerate(fn):
        m0, m2 = _moments(f, q)
        crossings = 2 * math.sqrt(m2 / m0) * length  # |z|: up-crossings of +a and down-crossings of -a (Rice 1944)
        root = math.sqrt(2 * math.log(crossings))
        to_g = (2 * math.pi * f) ** 2 * math.sqrt(m0) / G0
        expected = (root + EULER_GAMMA / root) * to_g  # Davenport (1964), expected largest peak
        spread = math.pi / math.sqrt(6) / root * to_g  # Davenport (1964), its standard deviation
        assert scatter.expected_ers_g[index] == pytest.approx(expected, rel=1e-3)
        assert scatter.expected_ers_std_g[index] == pytest.approx(spread, rel=1e-3)
        values = scatter.ers_g[:, index]
        mean, std = float(np.mean(values)), float(np.std(values, ddof=1))
        error_mean = std / math.sqrt(records) / expected
        # standard error of a standard deviation: sqrt((kurtosis - 1) / (4 N)), Gumbel kurtosis 5.4
        error_std = math.sqrt((5.4 - 1) / (4 * records))
        print(f"fn {f:g}: mean / Davenport {mean / expected:.4f} (se {error_mean:.4f}), "
              f"std / Davenport {std / spread:.3f} (se {error_std:.3f})")
        assert abs(mean / expected - 1) <= 3 * error_mean + 0.04
        assert abs(std / spread - 1) <= 3 * error_std + 0.10


def test_one_record_recomputed_independently_with_lfilter_and_astm_rainflow():
    """The record's damage and ERS from scipy.signal.lfilter and an ASTM E1049-85 rainflow written apart.

    Measured (bench-flat, 8 s at 5120 Hz, Q 10, b 8, seed 1): vibsynth / independent 0.9972, 0.9925,
    0.9979 for the damage at 100, 200, 400 Hz and 0.9996, 0.9991, 0.9999 for the ERS. Allowed: 1.5 % and
    0.3 % (the independent path upsamples 8 x; vibsynth refines each peak by a parabola).
    """
    path = Path(__file__).resolve().parent / "independent" / "record_fds_check.py"
    spec = importlib.util.spec_from_file_location("record_fds_check", path)
    check = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(check)
    # the rainflow example of ASTM E1049-85 (fig. 6): -2, 1, -3, 5, -1, 3, -4, 4, -2; its counts from memory,
    # checked by hand against the steps of section 5.4.4
    ranges, counts = check.astm_rainflow([-2, 1, -3, 5, -1, 3, -4, 4, -2])
    assert sorted(zip(ranges.tolist(), counts.tolist())) == sorted(
        [(3, 0.5), (4, 0.5), (4, 1.0), (6, 0.5), (8, 0.5), (8, 0.5), (9, 0.5)])
    out = check.compare("bench-flat", 8.0, 2, 1, [100.0, 200.0, 400.0], 10.0, 8.0, 5120.0, 1)
    assert np.all(np.abs(np.asarray(out["fds_ratio"]) - 1) <= 0.015), out
    assert np.all(np.abs(np.asarray(out["ers_ratio"]) - 1) <= 0.003), out
