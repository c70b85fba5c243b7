"""Execution layer of the run stage: payloads, cache keys, the task cache, executors, progress.

The outside references here are numpy's own guarantees: ``np.savez``/``np.load`` keep an
array's bytes, dtype and shape, and ``numpy.random.SeedSequence`` streams depend only on
their entropy and spawn key.  The back-end check compares in-process results with a real
``distributed.LocalCluster`` (reference library: dask.distributed).
"""

from __future__ import annotations

import ctypes
import io
import json
import logging
import math
import os
import signal
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

import conecheck
from conecheck.errors import InputError
from conecheck.run import cache as cache_mod
from conecheck.run.cache import TaskCache, task_key
from conecheck.run.execute import (
    DaskExecutor,
    LocalExecutor,
    Task,
    TaskFailed,
    make_executor,
)
from conecheck.run.progress import Progress
from conecheck.run.serialize import (
    measurement_from_payload,
    measurement_to_payload,
    pack,
    unpack,
)
from conecheck.stats.base import Measurement
from conecheck.streams import seeded_rng


# --------------------------------------------------------------------------- helpers
def assert_identical(a, b, where="value"):
    """Same types, and arrays with the same dtype, shape, memory order and bytes."""
    assert type(a) is type(b), f"{where}: {type(a)} != {type(b)}"
    if isinstance(a, np.ndarray) or isinstance(a, np.generic):
        a, b = np.asarray(a), np.asarray(b)
        assert a.dtype == b.dtype and a.shape == b.shape, where
        assert a.flags.f_contiguous == b.flags.f_contiguous, where
        assert a.tobytes() == b.tobytes(), where
    elif isinstance(a, Measurement):
        for f in ("name", "bins", "value", "delete_one", "bin_edges", "bin_label",
                  "value_label", "extra"):
            assert_identical(getattr(a, f), getattr(b, f), f"{where}.{f}")
    elif isinstance(a, dict):
        assert list(a) == list(b), where
        for k in a:
            assert_identical(a[k], b[k], f"{where}[{k!r}]")
    elif isinstance(a, (list, tuple)):
        assert len(a) == len(b), where
        for i, (x, y) in enumerate(zip(a, b, strict=True)):
            assert_identical(x, y, f"{where}[{i}]")
    elif isinstance(a, float):
        assert a.hex() == b.hex(), where  # bit-exact, also for nan and -0.0
    else:
        assert a == b, where


def through_disk(arrays, meta, tmp_path):
    """Round trip through the real storage: an .npz (no pickle) and JSON text."""
    f = tmp_path / "payload.npz"
    np.savez(f, **arrays)
    with np.load(f, allow_pickle=False) as z:
        back = {k: z[k] for k in z.files}
    return back, json.loads(json.dumps(meta, allow_nan=False))


def measurement(rng, with_jk=True):
    p = 6
    return Measurement(
        name="wp", bins=np.geomspace(0.3, 20.0, p), value=rng.normal(size=p),
        delete_one=rng.normal(size=(5, p)) if with_jk else None,
        bin_edges=np.geomspace(0.2, 25.0, p + 1) if with_jk else None,
        bin_label="r_p [Mpc/h]", value_label="w_p [Mpc/h]",
        extra={"n_pairs": 123456789012, "frac": 0.1 + 0.2, "nan": math.nan,
               "flags": [True, False], "note": "kestrel north", "none": None})


# Task functions live at module level so dask workers can import them by name.
CALLS: list[str] = []


def square(x):
    CALLS.append(f"square {x}")
    return {"x": np.array([x, x * x], dtype=np.int64), "half": x / 2}


def fail_if(x, bad, kind="value"):
    CALLS.append(f"fail_if {x}")
    if x in bad:
        if kind == "input":
            raise InputError(f"samples.bright.mag_max: expected a number, got {x!r}")
        raise ValueError(f"boom at {x}")
    return np.full(3, float(x))


def check_earlier_cached(root, key):
    """Asserts that the task before it was already cached when it started."""
    assert key in TaskCache(root), "earlier result was not cached as soon as it finished"
    return 1


def interrupt():
    raise KeyboardInterrupt


def swallow_a_ctrl_c(x):
    """Receives SIGINT where the KeyboardInterrupt is lost, as in a ctypes callback (numba
    caching a compiled kernel), then finishes normally."""
    CALLS.append(f"swallow {x}")
    try:
        signal.raise_signal(signal.SIGINT)  # delivered to this (the main) thread at once
    except KeyboardInterrupt:
        pass
    return {"x": np.array([x], dtype=np.int64)}


def ctrl_c_in_a_ctypes_callback(x):
    """Receives SIGINT inside a ctypes callback (as numba does when it caches a compiled
    kernel): Python cannot raise the KeyboardInterrupt there and hands it to
    sys.unraisablehook. A ValueError raised in a second callback goes the same way."""
    CALLS.append(f"callback {x}")

    def interrupted():
        signal.raise_signal(signal.SIGINT)  # the handler runs inside this callback

    def failing():
        raise ValueError("not an interrupt")

    ctypes.CFUNCTYPE(None)(interrupted)()
    ctypes.CFUNCTYPE(None)(failing)()
    return {"x": np.array([x], dtype=np.int64)}


def flaky(marker, log_file, seed, i):
    """Draws task-keyed numbers; task 3 fails while ``marker`` exists.  Logs each call."""
    with open(log_file, "a") as f:
        f.write(f"{i}\n")
    if i == 3 and os.path.exists(marker):
        raise RuntimeError("worker lost its scratch disk")
    return seeded_rng(seed, "cone", i).normal(size=4)


def draw(seed, i, shared, scale=1.0):
    """Task-keyed random numbers, depending on a shared input."""
    g = seeded_rng(seed, "cone", i, "bright")
    return {"u": g.uniform(size=8) * scale + shared.sum(), "n": int(g.poisson(50.0))}


def input_fails(x):
    raise InputError(f"footprint: no pixel of cut {x} has completeness > 0")


# --------------------------------------------------------------------------- serialize
def test_measurement_payload_round_trip_is_bit_exact(tmp_path):
    rng = np.random.default_rng(1)
    for m in (measurement(rng), measurement(rng, with_jk=False)):
        arrays, meta = measurement_to_payload(m)
        assert {"bins", "value"} <= set(arrays)
        back = measurement_from_payload(*through_disk(arrays, meta, tmp_path))
        assert_identical(m, back)
    assert back.delete_one is None and back.bin_edges is None


def test_pack_nested_structure_round_trip_is_bit_exact(tmp_path):
    rng = np.random.default_rng(2)
    obj = {
        "measurements": {"bright": {"primary": [measurement(rng), measurement(rng, False)]}},
        "fortran": np.asfortranarray(rng.normal(size=(3, 4))),
        "zero_d": np.array(7.5),
        "ints": np.arange(5, dtype=np.int32),
        "flags": rng.random(4) > 0.5,
        "text": np.array(["a", "bc"]),
        "np_scalars": [np.float32(0.1), np.int64(-3), np.float64(1e-300), np.bool_(True)],
        "floats": [math.nan, math.inf, -math.inf, -0.0, 0.1 + 0.2, 5e-324],
        "big_int": 2**80 + 1,
        "pair": (1, "two", None),
        "empty": {},
        "false": False,
    }
    back = unpack(*through_disk(*pack(obj), tmp_path))
    assert_identical(obj, back)
    # A user dict whose keys look like the payload's own tags stays a plain dict.
    tricky = {"t": "array", "k": "a0", "v": [1]}
    assert_identical(tricky, unpack(*through_disk(*pack(tricky), tmp_path)))


def test_pack_refuses_what_it_cannot_store_without_pickle():
    with pytest.raises(TypeError, match=r"result\['cat'\]\[1\].*object"):
        pack({"cat": [np.zeros(2), np.array([{"a": 1}], dtype=object)]})
    with pytest.raises(TypeError, match="keys must be str"):
        pack({1: 2})
    with pytest.raises(TypeError, match="cannot be stored"):
        pack({"s": {1, 2}})


# --------------------------------------------------------------------------- task keys
@dataclass(frozen=True)
class CutA:
    z_min: float
    z_max: float


@dataclass(frozen=True)
class CutB:
    z_min: float
    z_max: float


def test_task_key_is_stable_and_sensitive():
    inputs = {"seed": 7, "cut": CutA(0.1, 0.3), "edges": np.geomspace(0.5, 20.0, 9),
              "path": Path("kestrel/mask.fits"), "tags": ("a", "b"), "pi_max": 40.0}
    k = task_key("cone", inputs)
    assert len(k) == 24 and int(k, 16) >= 0
    reordered = {key: inputs[key] for key in reversed(list(inputs))}
    assert task_key("cone", reordered) == k
    assert task_key("cone", {**inputs, "pi_max": np.float64(40.0)}) == k
    assert task_key("cone", {**inputs, "tags": ["a", "b"]}) == k
    assert task_key("cone", {**inputs, "seed": np.int32(7)}) == k

    one_ulp = np.nextafter(40.0, 50.0)
    edges = inputs["edges"].copy()
    edges[3] = np.nextafter(edges[3], 0.0)
    changed = [
        task_key("randoms", inputs),
        task_key("cone", {**inputs, "pi_max": float(one_ulp)}),
        task_key("cone", {**inputs, "edges": edges}),
        task_key("cone", {**inputs, "edges": inputs["edges"].astype(np.float32)}),
        task_key("cone", {**inputs, "cut": CutB(0.1, 0.3)}),
        task_key("cone", {**inputs, "cut": CutA(0.1, np.nextafter(0.3, 1.0))}),
        task_key("cone", {**inputs, "seed": "7"}),
    ]
    assert k not in changed and len(set(changed)) == len(changed)
    with pytest.raises(TypeError, match="cannot hash"):
        task_key("cone", {"thing": object()})


def test_task_key_and_seeded_rng_do_not_depend_on_the_process():
    code = (
        "import numpy as np\n"
        "from conecheck.run.cache import task_key\n"
        "from conecheck.streams import seeded_rng\n"
        "print(task_key('cone', {'labels': {'bright', 'faint', 'all'}, 'x': 0.1,"
        " 'a': np.arange(4.0)}))\n"
        "print(seeded_rng(11, 'cone', 3, 'bright').integers(0, 2**62))\n"
    )
    outs = []
    for hash_seed in ("1", "2"):
        env = {**os.environ, "PYTHONHASHSEED": hash_seed}
        run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                             env=env, check=True)
        outs.append(run.stdout.split())
    here = [task_key("cone", {"labels": {"bright", "faint", "all"}, "x": 0.1,
                              "a": np.arange(4.0)}),
            str(seeded_rng(11, "cone", 3, "bright").integers(0, 2**62))]
    assert outs[0] == outs[1] == here


def test_task_key_changes_with_code_version(monkeypatch):
    inputs = {"seed": 1}
    k = task_key("box", inputs)
    monkeypatch.setattr(cache_mod, "__version__", conecheck.__version__ + ".post1")
    k_version = task_key("box", inputs)
    monkeypatch.undo()
    monkeypatch.setattr(cache_mod, "CACHE_FORMAT", cache_mod.CACHE_FORMAT + 1)
    k_format = task_key("box", inputs)
    monkeypatch.undo()
    # the same version with different source code (an editable install being edited)
    monkeypatch.setattr(cache_mod, "_source_digest", lambda: "0" * 64)
    k_source = task_key("box", inputs)
    assert len({k, k_version, k_format, k_source}) == 4


# --------------------------------------------------------------------------- seeded_rng
def test_seeded_rng_streams_follow_seedsequence():
    a = seeded_rng(5, "cone", 3).normal(size=16)
    assert np.array_equal(a, seeded_rng(5, "cone", 3).normal(size=16))
    others = [seeded_rng(6, "cone", 3), seeded_rng(5, "cone", 4), seeded_rng(5, "cone", "3"),
              seeded_rng(5, "cone3"), seeded_rng(5, 3, "cone")]
    for g in others:
        assert not np.array_equal(a, g.normal(size=16))
    # The generator is numpy's default bit generator seeded by a SeedSequence rooted at
    # the run seed (numpy.random documentation: SeedSequence with spawn_key).
    g = seeded_rng(5, "x")
    assert isinstance(g.bit_generator, np.random.PCG64)
    assert g.bit_generator.seed_seq.entropy == 5 and len(g.bit_generator.seed_seq.spawn_key) == 8
    with pytest.raises(InputError, match="seed"):
        seeded_rng(-1, "cone")
    with pytest.raises(TypeError):
        seeded_rng(1, 0.5)


# --------------------------------------------------------------------------- cache
def test_cache_put_get_round_trip_and_layout(tmp_path):
    rng = np.random.default_rng(3)
    c = TaskCache(tmp_path / "cache")
    key = task_key("cone", {"i": 1})
    obj = {"m": [measurement(rng)], "nz": np.arange(10.0), "none": None}
    assert c.get(key) is None and key not in c
    c.put(key, obj, label="cone 1 / sample bright", kind="cone")
    assert key in c
    npz = tmp_path / "cache" / key[:2] / f"{key}.npz"
    doc = json.loads((tmp_path / "cache" / key[:2] / f"{key}.json").read_text())
    assert npz.is_file()
    assert doc["label"] == "cone 1 / sample bright" and doc["kind"] == "cone"
    assert doc["key"] == key and len(doc["npz_sha256"]) == 64 and doc["created"]
    assert_identical(obj, c.get(key))
    # A stored None is told apart from a miss with a sentinel default.
    c.put(task_key("cone", {"i": 2}), None)
    sentinel = object()
    assert c.get(task_key("cone", {"i": 2}), default=sentinel) is None
    assert c.get(task_key("cone", {"i": 3}), default=sentinel) is sentinel
    assert c.stats == {"hits": 2, "misses": 2, "corrupt": 0, "writes": 2}


@pytest.mark.parametrize("damage", ["npz_byte", "npz_truncated", "npz_replaced", "json",
                                    "npz_missing"])
def test_corrupt_entry_is_reported_removed_and_recomputed(tmp_path, caplog, damage):
    c = TaskCache(tmp_path)
    key = task_key("randoms", {"cut": "primary"})
    c.put(key, {"ra": np.linspace(0.0, 90.0, 1000)}, label="randoms / sample bright / cut "
          "primary", kind="randoms")
    npz = tmp_path / key[:2] / f"{key}.npz"
    meta = tmp_path / key[:2] / f"{key}.json"
    if damage == "npz_byte":
        data = bytearray(npz.read_bytes())
        data[len(data) // 2] ^= 0xFF
        npz.write_bytes(bytes(data))
    elif damage == "npz_truncated":
        npz.write_bytes(npz.read_bytes()[:100])
    elif damage == "npz_replaced":  # a valid archive, but not the one the entry recorded
        with open(npz, "wb") as f:
            np.savez(f, a0=np.linspace(0.0, 90.0, 999))
    elif damage == "json":
        meta.write_text(meta.read_text()[:40])
    else:
        npz.unlink()
    with caplog.at_level(logging.WARNING, logger="conecheck.run"):
        assert c.get(key, label="randoms / sample bright / cut primary") is None
    msg = caplog.text
    assert key in msg and "randoms / sample bright / cut primary" in msg
    assert not npz.exists() and not meta.exists() and key not in c
    assert c.stats["corrupt"] == 1


def test_disabled_cache_ignores_entries_but_writes(tmp_path):
    key = task_key("box", {"sample": "bright"})
    TaskCache(tmp_path).put(key, np.arange(3))
    fresh = TaskCache(tmp_path, enabled=False)
    assert fresh.get(key) is None and key not in fresh
    key2 = task_key("box", {"sample": "faint"})
    fresh.put(key2, np.arange(4))
    assert np.array_equal(TaskCache(tmp_path).get(key2), np.arange(4))


# --------------------------------------------------------------------------- local executor
def make_tasks(func, values, **kwargs):
    return [Task(key=task_key(func.__name__, {"x": x, **kwargs}), label=f"cone {x}",
                 func=func, args=(x,), kwargs=kwargs, kind="cone") for x in values]


def test_local_executor_uses_cache_and_keeps_order(tmp_path):
    CALLS.clear()
    c = TaskCache(tmp_path)
    tasks = make_tasks(square, [3, 1, 2])
    first = LocalExecutor().run(tasks, c)
    assert [r["x"][1] for r in first] == [9, 1, 4]
    assert len(CALLS) == 3
    again = LocalExecutor().run(tasks + [tasks[0]], TaskCache(tmp_path))
    assert len(CALLS) == 3  # nothing recomputed
    for a, b in zip(first + [first[0]], again, strict=True):
        assert_identical(a, b)
    # Duplicated keys run once; no cache at all still works.
    CALLS.clear()
    out = LocalExecutor().run(tasks[:1] * 3, None)
    assert len(CALLS) == 1 and len(out) == 3


def test_results_are_cached_as_each_task_finishes(tmp_path):
    t0 = make_tasks(square, [5])[0]
    t1 = Task(key=task_key("check", {}), label="check", func=check_earlier_cached,
              args=(tmp_path, t0.key))
    t2 = Task(key=task_key("interrupt", {}), label="interrupt", func=interrupt)
    with pytest.raises(KeyboardInterrupt):
        LocalExecutor().run([t0, t1, t2], TaskCache(tmp_path))
    c = TaskCache(tmp_path)
    assert t0.key in c and t1.key in c and t2.key not in c


def test_a_swallowed_ctrl_c_still_stops_the_run_after_its_task(tmp_path):
    """A Ctrl-C lost inside a task (Python prints it as ignored in a ctypes callback) is
    remembered: the task's result is cached, then the run stops before the next task."""
    CALLS.clear()
    tasks = make_tasks(swallow_a_ctrl_c, [1]) + make_tasks(square, [2])
    with pytest.raises(KeyboardInterrupt):
        LocalExecutor().run(tasks, TaskCache(tmp_path))
    assert CALLS == ["swallow 1"]
    c = TaskCache(tmp_path)
    assert tasks[0].key in c and tasks[1].key not in c
    # the handler is put back: this process's Ctrl-C behaves as before
    assert signal.getsignal(signal.SIGINT) is signal.default_int_handler


def test_a_ctrl_c_inside_a_ctypes_callback_stops_the_run_without_a_traceback(tmp_path,
                                                                             monkeypatch):
    """The interrupt lost in a ctypes callback is not reported as "ignored" with a
    traceback (a Ctrl-C must print one line, not a traceback), while any other exception
    lost there still reaches the hook; the run stops after the task, and the hook is put
    back afterwards."""
    reported = []
    monkeypatch.setattr(sys, "unraisablehook", reported.append)
    CALLS.clear()
    tasks = make_tasks(ctrl_c_in_a_ctypes_callback, [1]) + make_tasks(square, [2])
    with pytest.raises(KeyboardInterrupt):
        LocalExecutor().run(tasks, TaskCache(tmp_path))
    assert CALLS == ["callback 1"]
    assert [type(u.exc_value) for u in reported] == [ValueError]
    assert sys.unraisablehook == reported.append
    assert signal.getsignal(signal.SIGINT) is signal.default_int_handler


#: A run whose first task is a parallel numba kernel that receives SIGINT while it works;
#: such kernels call back into numba as they finish, where the interrupt lands.
CTRL_C_IN_A_PARALLEL_KERNEL = """
import os, signal, sys, threading
import numba, numpy as np
from numba import prange
from conecheck.run.cache import TaskCache, task_key
from conecheck.run.execute import LocalExecutor, Task

@numba.njit(parallel=True)
def spin(n):
    out = np.zeros(4)
    for c in prange(4):
        s = 0.0
        for i in range(n):
            s += np.sqrt(i)
        out[c] = s
    return out

spin(10)  # compiled before the clock starts

def work():
    threading.Timer(0.05, os.kill, (os.getpid(), signal.SIGINT)).start()
    return {"x": spin(400_000_000)}  # over a second of work on two cores

def after():
    return {"x": np.zeros(1)}

tasks = [Task(key=task_key("spin", {}), label="spin", func=work),
         Task(key=task_key("after", {}), label="after", func=after)]
cache = TaskCache(sys.argv[1])
try:
    LocalExecutor().run(tasks, cache)
except KeyboardInterrupt:
    print("interrupted", tasks[0].key in cache, tasks[1].key in cache)
"""


def test_a_ctrl_c_inside_a_parallel_numba_kernel_stops_the_run_after_its_task(tmp_path):
    """Raised where it lands (numba's callback as a parallel kernel finishes), the
    KeyboardInterrupt went back into compiled code: a SystemError, or a segmentation fault
    in the interrupt test under load. The latch records it there, and the run stops after
    the task, whose result is kept. In a child process, which could crash."""
    done = subprocess.run([sys.executable, "-c", CTRL_C_IN_A_PARALLEL_KERNEL, str(tmp_path)],
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    assert done.stdout.split() == ["interrupted", "True", "False"], done.stderr
    assert "Error" not in done.stderr, done.stderr


def test_failures_are_reported_after_the_other_tasks_finish(tmp_path):
    CALLS.clear()
    c = TaskCache(tmp_path)
    tasks = make_tasks(fail_if, [0, 1, 2, 3, 4], bad=(3, 1))
    with pytest.raises(TaskFailed) as info:
        LocalExecutor().run(tasks, c)
    err = info.value
    assert err.task_label == "cone 1" and "boom at 1" in err.error
    assert "cone 1" in str(err) and "2 of 5 tasks failed" in str(err)
    assert "ValueError" in err.details or "boom" in err.details
    assert len(CALLS) == 5
    assert [t.key in c for t in tasks] == [True, False, True, False, True]


def test_input_error_in_a_task_stays_an_input_error(tmp_path):
    tasks = make_tasks(fail_if, [0, 7], bad=(7,), kind="input")
    with pytest.raises(InputError) as info:
        LocalExecutor().run(tasks, TaskCache(tmp_path))
    assert not isinstance(info.value, TaskFailed)
    assert str(info.value).startswith("cone 7: samples.bright.mag_max")
    assert info.value.problems == [str(info.value)]


def test_interrupted_run_resumes_to_the_uninterrupted_result(tmp_path):
    marker, log_file = tmp_path / "marker", tmp_path / "calls.log"

    def tasks():
        return [Task(key=task_key("flaky", {"seed": 9, "i": i}), label=f"cone {i}",
                     func=flaky, args=(str(marker), str(log_file), 9, i), kind="cone")
                for i in range(5)]

    reference = LocalExecutor().run(tasks(), TaskCache(tmp_path / "reference"))
    log_file.unlink()
    marker.touch()
    with pytest.raises(TaskFailed, match="cone 3.*scratch disk"):
        LocalExecutor().run(tasks(), TaskCache(tmp_path / "run"))
    assert log_file.read_text().split() == ["0", "1", "2", "3", "4"]
    marker.unlink()
    log_file.unlink()
    resumed = LocalExecutor().run(tasks(), TaskCache(tmp_path / "run"))
    assert log_file.read_text().split() == ["3"]
    for a, b in zip(reference, resumed, strict=True):
        assert_identical(a, b)


def test_make_executor_accepts_only_known_schedulers():
    assert isinstance(make_executor(None, None), LocalExecutor)
    assert isinstance(make_executor("local", 4), LocalExecutor)
    for bad in ("dask", "127.0.0.1:8786", "http://host:8786"):
        with pytest.raises(InputError, match=r"compute\.scheduler.*--scheduler") as info:
            make_executor(bad, None)
        assert repr(bad) in str(info.value) and "tcp://" in str(info.value)
    with pytest.raises(InputError, match="workers"):
        make_executor("local", 0)


# --------------------------------------------------------------------------- progress
class FakeTTY(io.StringIO):
    def isatty(self):
        return True


def test_progress_on_a_terminal_updates_one_line():
    out = FakeTTY()
    p = Progress(stream=out, refresh_seconds=0.0)  # redraw at every update
    p.start("cones", 4)
    for i in range(4):
        p.advance(note=f"cone {i}")
    p.finish()
    text = out.getvalue()
    assert "\r" in text and "cones: 2/4" in text and "eta" in text and "cone 2" in text
    # the bar redraws in place (carriage returns) and only the stage's summary ends a line
    assert text.count("\n") == 1 and text.endswith("\n") and "cones: 4/4 done in" in text
    assert p.timings["cones"] >= 0


def test_progress_elsewhere_logs_about_every_tenth(caplog):
    with caplog.at_level(logging.INFO, logger="conecheck.run"):
        p = Progress(stream=io.StringIO())
        p.start("randoms", 100)
        for _ in range(100):
            p.advance()
        p.finish()
    lines = [r.getMessage() for r in caplog.records if r.name == "conecheck.run"]
    assert 9 <= len(lines) <= 11 and lines[-1].startswith("randoms: 100/100 done")


def test_quiet_progress_is_silent_but_times(caplog):
    out = FakeTTY()
    with caplog.at_level(logging.INFO, logger="conecheck.run"):
        p = Progress(enabled=False, stream=out)
        LocalExecutor().run(make_tasks(square, [1, 2]), None, progress=p, stage="box")
    assert out.getvalue() == "" and not caplog.records
    assert set(p.timings) == {"box"}


# --------------------------------------------------------------------------- dask
@pytest.fixture(scope="module")
def local_cluster():
    env = dict(os.environ)
    try:
        ex = DaskExecutor("local-cluster", workers=2)
    except InputError as exc:  # no process spawning or loopback sockets on this machine
        pytest.skip(f"distributed cannot start a local cluster here: {exc}")
    ex.env_unchanged = dict(os.environ) == env
    with ex:
        yield ex


def test_local_cluster_leaves_this_process_environment_alone(local_cluster):
    assert local_cluster.env_unchanged
    assert "2 worker processes" in local_cluster.describe()


def test_local_cluster_matches_in_process_results(local_cluster, tmp_path):
    shared = np.arange(4.0)

    def tasks(ex):
        handle = ex.share(shared)
        return [Task(key=task_key("draw", {"seed": 21, "i": i}), label=f"cone {i}",
                     func=draw, args=(21, i, handle), kwargs={"scale": 2.0}, kind="cone")
                for i in range(6)]

    local = LocalExecutor().run(tasks(LocalExecutor()), None)
    dask_cache = TaskCache(tmp_path)
    remote = local_cluster.run(tasks(local_cluster), dask_cache, stage="cones")
    assert len(remote) == 6
    for a, b in zip(local, remote, strict=True):
        assert np.array_equal(a["u"], b["u"]) and a["n"] == b["n"]
    assert dask_cache.stats["writes"] == 6
    # What the cluster cached is what the in-process run reads back.
    cached = LocalExecutor().run(tasks(LocalExecutor()), TaskCache(tmp_path))
    for a, b in zip(local, cached, strict=True):
        assert_identical(a, b)


def test_local_cluster_reports_failures_like_local(local_cluster, tmp_path):
    c = TaskCache(tmp_path)
    tasks = make_tasks(fail_if, [0, 1, 2], bad=(2,))
    with pytest.raises(TaskFailed, match="cone 2.*boom at 2"):
        local_cluster.run(tasks, c)
    assert [t.key in c for t in tasks] == [True, True, False]
    bad_input = [Task(key=task_key("input_fails", {}), label="randoms / cut deep",
                      func=input_fails, args=("deep",))]
    with pytest.raises(InputError, match="^randoms / cut deep: footprint"):
        local_cluster.run(bad_input, c)


def test_connecting_to_a_running_scheduler(local_cluster):
    address = local_cluster.client.scheduler.address
    assert address.startswith("tcp://127.0.0.1:")
    tasks = make_tasks(fail_if, [4, 5], bad=())
    with make_executor(address, None) as remote:
        assert isinstance(remote, DaskExecutor) and address in remote.describe()
        out = remote.run(tasks, None)
    assert [r.tolist() for r in out] == [[4.0] * 3, [5.0] * 3]
    # Closing a client of someone else's scheduler leaves that cluster running.
    assert local_cluster.run(tasks[:1], None)[0].tolist() == [4.0] * 3


def test_unreachable_scheduler_is_an_input_error():
    import socket

    with socket.socket() as s:  # a port nobody listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    with pytest.raises(InputError, match=f"tcp://127.0.0.1:{port}.*(no answer|no dask "
                                         f"scheduler answers)"):
        DaskExecutor(f"tcp://127.0.0.1:{port}", connect_timeout=1.0)


def test_task_failed_survives_pickling():
    import pickle

    err = TaskFailed("cone 3 / sample bright / cut primary", "ValueError: boom", 2, 9, "tb",
                     cached=False)
    back = pickle.loads(pickle.dumps(err))
    assert str(back) == str(err) and back.task_label == err.task_label and not back.cached
    assert "2 of 9 tasks failed" in str(back) and "cached" not in str(back)
