"""A stop request (SIGINT / SIGTERM in the CLI) is honoured during the initial search, the polish
and the astrometry-only fast path within about two seconds (common practice, no source).

The stop flag is set from a timer thread while the stage runs on a data set large enough that
the stage alone would take far longer (thousands of epochs, the full period grid).
"""

from __future__ import annotations

import threading
import time

import numpy as np
import pytest

from orbitmass import Fit
from orbitmass.demo.simulate import TrueOrbit
from orbitmass.inference.initialise import initialise_walkers
from orbitmass.io.target import read_target
from orbitmass.model.likelihood import LogPosterior
from orbitmass.model.parameters import ParameterSpace

from tests.helpers.targets import make_target

TRUTH = TrueOrbit(mass_msun=1.9, distance_pc=20.0, period_yr=12.0, eccentricity=0.3, inclination_deg=60.0,
                  arg_periastron_deg=40.0, ascending_node_deg=100.0, periastron_time=2010.0)
#: Seconds allowed between the stop request and the return (the issue asks for "a couple").
GRACE_S = 2.5


class _Stop:
    """A flag set by a timer thread ``delay`` seconds after :meth:`start`."""

    def __init__(self, delay: float):
        self.delay = delay
        self.event = threading.Event()
        self.set_at: float | None = None

    def _fire(self):
        self.set_at = time.perf_counter()
        self.event.set()

    def start(self):
        timer = threading.Timer(self.delay, self._fire)
        timer.daemon = True
        timer.start()
        return self

    def __call__(self) -> bool:
        return self.event.is_set()


def _big(tmp_path, rng, *, velocities: bool):
    t = np.sort(rng.uniform(1990, 2025, 3000))
    return make_target(tmp_path / "big", TRUTH, rng=rng, t_pos=t, t_rv=t[::2] if velocities else None,
                       pos_err=2.0, rv_err=1.0,
                       distance_toml='parallax = { dist = "normal", mean = "50 mas", sd = "1 mas" }')


def test_initial_search_stops_within_grace(tmp_path, rng):
    post = LogPosterior(ParameterSpace(read_target(_big(tmp_path, rng, velocities=True))))
    stop = _Stop(0.5).start()
    init = initialise_walkers(post, 64, np.random.default_rng(1), stop_flag=stop)
    done = time.perf_counter()
    assert stop.set_at is not None and init.interrupted
    assert done - stop.set_at < GRACE_S
    assert init.walkers.shape == (64, post.space.ndim) and np.all(np.isfinite(post(init.walkers)))


@pytest.mark.parametrize("linear", [False, True], ids=["normal-path", "fast-path"])
def test_fit_stops_within_grace_and_says_interrupted(tmp_path, rng, linear):
    path = _big(tmp_path, rng, velocities=not linear)
    fit = Fit(seed=3, progress=False, linear=linear)
    stop = _Stop(0.5).start()
    fit.fit(path, stop_flag=stop)
    done = time.perf_counter()
    assert stop.set_at is not None
    assert done - stop.set_at < GRACE_S
    d = fit.summary["diagnostics"]
    assert d["interrupted"] and not d["converged"]
    if linear:
        assert "linear_path" in d  # the fast path itself was stopped, not bypassed
    assert len(fit.results.samples) > 0


def test_polish_stops_within_grace():
    from orbitmass.inference.initialise import polish

    calls = {"n": 0}

    def slow_density(x):  # a smooth log density that costs 50 ms per call
        calls["n"] += 1
        time.sleep(0.05)
        return -0.5 * np.sum((np.atleast_2d(x) - 3.0) ** 2 / np.linspace(0.01, 1.0, x.shape[-1]) ** 2, axis=1)

    stop = _Stop(0.3).start()
    x0 = np.zeros(6)
    best, val = polish(slow_density, x0, 2000, stop)
    assert stop.set_at is not None and time.perf_counter() - stop.set_at < GRACE_S
    assert np.isfinite(val) and val >= float(slow_density(x0)[0])  # the best point so far, not the start


@pytest.mark.slow
def test_cli_sigint_during_initialisation_exits_130(tmp_path, rng):
    import json
    import os
    import signal
    import subprocess
    import sys

    path = _big(tmp_path, rng, velocities=True)
    out = tmp_path / "run"
    cmd = [sys.executable, "-m", "orbitmass.cli", "fit", str(path), "--out", str(out), "--seed", "2",
           "--no-progress"]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env=dict(os.environ, MPLBACKEND="Agg"))
    deadline = time.time() + 120
    while not out.exists() and time.time() < deadline and proc.poll() is None:
        time.sleep(0.05)  # the CLI creates --out just before it installs its signal handlers
    time.sleep(1.0)  # now inside the initial search (it alone would take minutes on 3000 epochs)
    proc.send_signal(signal.SIGINT)
    _, stderr = proc.communicate(timeout=180)
    assert proc.returncode == 130, stderr
    assert "Traceback" not in stderr
    summary = json.loads((out / "summary.json").read_text())
    assert summary["diagnostics"]["interrupted"] is True and summary["diagnostics"]["converged"] is False
