"""Interrupts and kills on every back end, then resume to the same numbers.

A run is started as a separate process group (as a terminal runs it), interrupted with
SIGINT (Ctrl-C reaches every process of the group) or killed with SIGKILL once a given
number of tasks has reached the cache, then resumed; the resumed results must equal an
uninterrupted run's to the bit.  The effect ladder on a dask LocalCluster must equal the
ladder run in-process.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import pytest
import tomli_w
from run_helpers import tiny_dict

from conecheck.config import config_from_dict
from conecheck.run import validate as validate_mod
from conecheck.run.pipeline import prepare_inputs

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="POSIX signals")

BACKENDS = {"local": [], "local-cluster": ["--scheduler", "local-cluster", "--workers", "2"]}


def _config(tmp: Path, n_cones: int = 3,
            measure: tuple[str, ...] = ("number_density", "wp")) -> str:
    d = tiny_dict(**{"cones.n_cones": n_cones, "statistics.measure": list(measure)})
    path = tmp / "c.toml"
    path.write_text(tomli_w.dumps(d), encoding="utf-8")
    return str(path)


def _start(cfg: str, out: Path, extra: list[str]) -> subprocess.Popen[str]:
    # A shell starts background jobs with SIGINT ignored, and an ignored signal stays
    # ignored across exec; a handled one is reset to the default, under which Python turns
    # Ctrl-C into KeyboardInterrupt as in a terminal.
    old = signal.getsignal(signal.SIGINT)
    if old == signal.SIG_IGN:
        signal.signal(signal.SIGINT, signal.default_int_handler)
    try:
        return _popen(cfg, out, extra)
    finally:
        signal.signal(signal.SIGINT, old)


def _popen(cfg: str, out: Path, extra: list[str]) -> subprocess.Popen[str]:
    return subprocess.Popen([sys.executable, "-m", "conecheck.cli", "run", "-q", cfg, "-o",
                             str(out), *extra], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, start_new_session=True)


def _cached(out: Path) -> int:
    return len(list((out / "cache").glob("??/*.json")))


def _wait_for_entries(proc: subprocess.Popen[str], out: Path, n: int,
                      limit: float = 240.0) -> bool:
    """Wait until ``n`` cache entries exist; False when the run ended first."""
    t0 = time.monotonic()
    while _cached(out) < n:
        if proc.poll() is not None:
            return False
        if time.monotonic() - t0 > limit:
            raise AssertionError(f"no {n} cache entries after {limit} s")
        time.sleep(0.05)
    return True


def _numbers(out: Path) -> dict[str, Any]:
    r = json.loads((out / "results.json").read_text())
    r.pop("provenance")  # dates, timings, command lines
    return r


def _finish(cfg: str, out: Path, extra: list[str]) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "conecheck.cli", "run", "-q", cfg, "-o",
                           str(out), *extra], capture_output=True, text=True, timeout=600)


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("reference")
    cfg = _config(tmp)
    done = _finish(cfg, tmp / "run", [])
    assert done.returncode in (0, 1), done.stderr
    return cfg, _numbers(tmp / "run")


@pytest.mark.parametrize("backend", list(BACKENDS))
def test_interrupt_and_kill_then_resume_give_identical_results(backend, reference, tmp_path):
    cfg, expected = reference
    out = tmp_path / "run"
    extra = BACKENDS[backend]
    # Ctrl-C to the whole process group after the first task (the box), then SIGKILL later
    # in the cone stage; each leaves what finished in the cache.
    for n_entries, sig in ((1, signal.SIGINT), (3, signal.SIGKILL)):
        proc = _start(cfg, out, extra)
        reached = _wait_for_entries(proc, out, n_entries)
        if reached:
            os.killpg(proc.pid, sig)
        _, err = proc.communicate(timeout=120)
        if not reached:  # finished before the signal: nothing to interrupt at this point
            continue
        if sig == signal.SIGINT:
            assert proc.returncode == 130, err
            assert "interrupted" in err and "Traceback" not in err, err
            assert len(err.strip().splitlines()) <= 3, err  # no worker tracebacks
        else:
            assert proc.returncode == -signal.SIGKILL
    done = _finish(cfg, out, extra)
    assert done.returncode in (0, 1), done.stderr
    assert _numbers(out) == expected
    assert not list(out.rglob(".*.partial-*"))


def test_ladder_on_a_local_cluster_equals_the_local_ladder(tmp_path):
    # The defect was in how the rungs share data with the workers, not in any statistic:
    # the cheapest statistic and two cones exercise every rung, correction and cut.
    cfg = _config(tmp_path, n_cones=2, measure=("number_density",))
    ladders = {}
    for backend, extra in BACKENDS.items():
        done = _finish(cfg, tmp_path / backend, ["--ladder", *extra])
        assert done.returncode in (0, 1), done.stderr
        r = json.loads((tmp_path / backend / "results.json").read_text())
        for section in ("ladder", "corrections", "cuts"):
            assert "error" not in r[section], r[section]["error"]
        for rung in r["ladder"]["rungs"]:
            rung.pop("seconds", None)
        ladders[backend] = {k: r[k] for k in ("ladder", "corrections", "cuts")}
    assert ladders["local"] == ladders["local-cluster"]


def _numba_frame():
    """A frame whose module is numba's, where the interrupt latch only records a Ctrl-C
    (Python runs the SIGINT handler in such a frame when a parallel kernel calls back)."""
    scope = {"__name__": "numba.core.serialize", "sys": sys}
    exec("def here():\n    return sys._getframe()\n", scope)
    return scope["here"]()


def test_a_ctrl_c_recorded_in_the_input_stage_stops_the_run_before_the_next_stage(
        tmp_path, monkeypatch):
    """The input stage builds the box, footprint and regions with numba kernels outside
    any task. A Ctrl-C that lands in numba's callback there is only recorded (raising it
    into compiled code crashes the process); the run raises it before the pre-flight."""
    reached = []

    def inputs_hit_by_ctrl_c(*args: Any, **kwargs: Any) -> Any:
        inp = prepare_inputs(*args, **kwargs)
        handler = signal.getsignal(signal.SIGINT)
        assert callable(handler) and handler is not signal.default_int_handler
        handler(signal.SIGINT, _numba_frame())  # recorded, not raised, as in numba
        reached.append("inputs")
        return inp

    def preflight(*args: Any, **kwargs: Any) -> Any:
        reached.append("preflight")
        raise AssertionError("the pre-flight ran after a Ctrl-C")

    monkeypatch.setattr(validate_mod, "prepare_inputs", inputs_hit_by_ctrl_c)
    monkeypatch.setattr(validate_mod, "preflight", preflight)
    before = signal.getsignal(signal.SIGINT)
    cfg = config_from_dict(tiny_dict(**{"cones.n_cones": 1}), "test", tmp_path)
    with pytest.raises(KeyboardInterrupt):
        validate_mod.validate(cfg, tmp_path / "run", progress=False)
    assert reached == ["inputs"]
    assert signal.getsignal(signal.SIGINT) is before  # the run's handler is gone again
