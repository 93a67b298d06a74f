"""Lyapunov spectra by the QR method against published values and exact identities."""

import os
import subprocess
import sys

import h5py
import numpy as np
import pytest

from assimbench.lyapunov import kaplan_yorke_dimension, lyapunov_spectrum
from assimbench.models.lorenz63 import make_lorenz63
from assimbench.models.lorenz96 import make_lorenz96


@pytest.fixture(scope="module")
def lorenz63():
    model = make_lorenz63()
    return lyapunov_spectrum(model, model.params, np.array([1.0, 1.0, 20.0]), time=2000.0)


def test_lorenz63_spectrum_matches_the_published_values(lorenz63):
    """Sprott, Chaos and Time-Series Analysis (OUP 2003): 0.906, 0, -14.572 for (10, 28, 8/3),
    Kaplan-Yorke dimension 2.062. Tolerances: the estimate over 2,000 time units moves by ~1e-3."""
    np.testing.assert_allclose(lorenz63.exponents, [0.906, 0.0, -14.572], atol=0.02)
    assert lorenz63.kaplan_yorke_dimension == pytest.approx(2.062, abs=0.005)
    assert lorenz63.positive_count == 1
    assert lorenz63.doubling_time == pytest.approx(np.log(2) / lorenz63.exponents[0])


def test_lorenz63_exponents_sum_to_the_constant_divergence(lorenz63):
    """Exact identity: the divergence of the Lorenz-63 field is -(sigma + 1 + beta) everywhere."""
    assert lorenz63.exponents.sum() == pytest.approx(-(10.0 + 1.0 + 8.0 / 3.0), abs=1e-3)
    assert lorenz63.running.shape == (100, 3) and lorenz63.times[-1] == pytest.approx(2000.0)


def test_lorenz96_forty_variables():
    """n=40, F=8: the sum is exactly -n (d f_i / d x_i = -1); leading exponent about 1.68, 13
    positive exponents (the 13th small) and a Kaplan-Yorke dimension about 27 (Karimi & Paul 2010,
    Chaos 20, 043105; from memory, hence the wide bands for a 300-time-unit estimate)."""
    model = make_lorenz96(40)
    spectrum = lyapunov_spectrum(model, model.params, 8.0 + 0.01 * np.arange(40), time=300.0)
    assert spectrum.exponents.sum() == pytest.approx(-40.0, abs=1e-3)
    assert 1.5 < spectrum.exponents[0] < 1.9
    assert 12 <= spectrum.positive_count <= 14
    assert 26.0 < spectrum.kaplan_yorke_dimension < 28.5
    # Errors double in about 0.42 time units, about 2 days at 0.05 = 6 hours (Lorenz & Emanuel 1998,
    # J. Atmos. Sci. 55; from memory).
    assert 0.35 < spectrum.doubling_time < 0.47
    assert np.all(np.diff(spectrum.exponents) <= 0)


def test_kaplan_yorke_dimension_of_textbook_spectra():
    """D = k + sum_{i<=k} l_i / |l_{k+1}| (Kaplan & Yorke 1979): (1, 0, -2) -> 2.5."""
    assert kaplan_yorke_dimension([1.0, 0.0, -2.0]) == pytest.approx(2.5)
    assert kaplan_yorke_dimension([-1.0, -2.0]) == 0.0
    assert kaplan_yorke_dimension([0.5, 0.1]) == 2.0


def _command():
    script = os.path.join(os.path.dirname(sys.executable), "assimbench-lyapunov")
    return [script] if os.path.exists(script) else [sys.executable, "-m", "assimbench.commands.lyapunov"]


def test_the_console_script_writes_the_spectrum_file(tmp_path):
    target = tmp_path / "l63.h5"
    done = subprocess.run(_command() + ["model=lorenz63", "time=2000", "observation.interval=0.25", f"output={target}"],
                          cwd=tmp_path, capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    assert "Kaplan-Yorke" in done.stdout and "analysis intervals" in done.stdout
    with h5py.File(target, "r") as f:
        assert f.attrs["complete"] and f.attrs["positive_count"] == 1
        assert f["exponents"].shape == (3,) and f["running"].shape == (100, 3)
        assert f.attrs["doubling_time_intervals"] == pytest.approx(f.attrs["doubling_time"] / 0.25)
        assert 1.9 < f.attrs["kaplan_yorke_dimension"] < 2.2
    bad = subprocess.run(_command() + ["count=50", f"output={tmp_path / 'bad.h5'}"], cwd=tmp_path,
                         capture_output=True, text=True, timeout=600)
    assert bad.returncode == 2 and bad.stderr.count("\n") == 1 and "count=50" in bad.stderr
    assert not (tmp_path / "bad.h5").exists()
