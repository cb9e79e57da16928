"""The recording path's statistics (benchlog._robust) against scipy, the reference library they stand in
for, and the recorder process importing no scipy at all (its import costs every recorder seconds of CPU)."""

from __future__ import annotations

import subprocess
import sys
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import signal, special, stats

from benchlog._robust import first_order_filter, normal_cdf, theil_sen

finite = st.floats(-1e6, 1e6, allow_nan=False, allow_infinity=False)


@settings(max_examples=60, deadline=None)
@given(
    st.lists(st.tuples(st.integers(-50, 50), finite), min_size=2, max_size=40), st.sampled_from([0.9, 0.95])
)
def test_theil_sen_is_scipy_theilslopes(points, alpha):
    # reference: scipy.stats.theilslopes (Theil 1950; Sen 1968, eq. 2.6 for the interval); integer x
    # makes ties in x, as repeated window cycles do
    x = np.array([p[0] for p in points], np.float64)
    y = np.array([p[1] for p in points], np.float64)
    if np.all(x == x[0]):
        return  # scipy warns and returns nan: nothing to compare
    ours = theil_sen(y, x, alpha=alpha)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # scipy's sqrt of a negative variance: nan, as ours
        ref = stats.theilslopes(y, x, alpha=alpha)
    np.testing.assert_array_equal(
        [ours.slope, ours.intercept, ours.low_slope, ours.high_slope],
        [ref.slope, ref.intercept, ref.low_slope, ref.high_slope],
    )


def test_theil_sen_of_a_clock_running_fast():
    # 50 ppm fast with a few wild receive times: the slope is 1 + 50e-6 (scipy.stats.theilslopes agrees)
    rng = np.random.default_rng(4)
    x = np.arange(200, dtype=np.float64) * 1e9
    y = x * (1 + 50e-6) + rng.normal(0, 1e5, 200)
    y[::17] += 5e7
    assert theil_sen(y, x).slope == stats.theilslopes(y, x).slope
    assert abs((theil_sen(y, x).slope - 1) * 1e6 - 50) < 0.5


def test_normal_cdf_is_scipy_ndtr():
    # reference: scipy.special.ndtr
    z = np.linspace(-9, 9, 1001)
    np.testing.assert_allclose(normal_cdf(z), special.ndtr(z), rtol=1e-13, atol=1e-300)
    assert normal_cdf(-1.959963984540054) == pytest.approx(0.025, rel=1e-12)


@pytest.mark.parametrize("lam", [0.05, 0.2, 1.0])
def test_first_order_filter_is_scipy_lfilter(lam):
    # reference: scipy.signal.lfilter, the EWMA recursion as a first-order IIR filter
    x = np.random.default_rng(1).normal(3.0, 1.0, 500)
    ref = signal.lfilter([lam], [1.0, -(1.0 - lam)], x, zi=[(1.0 - lam) * 2.5])[0]
    np.testing.assert_allclose(first_order_filter(x, lam, 2.5), ref, rtol=1e-12)


def test_a_recording_process_imports_no_scipy(tmp_path):
    # the demo records two benches through the real path (simulated sampler on a pty, the recorder, the
    # drift watch, the store) and prints its summary: none of it needs scipy
    db = str(tmp_path / "d.sqlite")
    code = (
        "import runpy, sys\n"
        f"sys.argv = ['benchlog', 'demo', '--no-dash', '--db', {db!r}, '--cycles', '200']\n"
        "try:\n    runpy.run_module('benchlog', run_name='__main__')\n"
        "except SystemExit as e:\n    assert not e.code, e.code\n"
        "print('SCIPY', sorted(m for m in sys.modules if m.split('.')[0] == 'scipy'))\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    assert "SCIPY []" in done.stdout, done.stdout[-500:]
