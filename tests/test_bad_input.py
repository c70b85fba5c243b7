"""Bad-input corpus: every class of unusable input exits 2, names its culprit, no traceback.

Each case builds one broken input in a temporary directory, runs the command line in this
process and checks three things: exit code 2 (unusable input or environment, never the code
of a failing statistic), no Python traceback on the terminal, and a message that names the
culprit (the config key, file, column or address) — the regular expression beside the case.
"""

from __future__ import annotations

import copy
import json
import re
import shutil
import socket
import threading
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import tomli_w
from astropy.table import Table
from run_helpers import tiny_dict

from conecheck.cli import main
from conecheck.errors import InputError
from conecheck.run.execute import DaskExecutor

L_BOX = 160.0


def _write_config(tmp: Path, d: dict[str, Any], name: str = "c.toml") -> str:
    d = copy.deepcopy(d)
    d.setdefault("output", {})["directory"] = str(tmp / "out")
    path = tmp / name
    path.write_text(tomli_w.dumps(d), encoding="utf-8")
    return str(path)


def _box_table(n: int = 3000, seed: int = 1) -> Table:
    """A small uniform galaxy box (positions in [0, L), km/s velocities, magnitudes)."""
    rng = np.random.default_rng(seed)
    t = Table({"x": rng.uniform(0, L_BOX, n), "y": rng.uniform(0, L_BOX, n),
               "z": rng.uniform(0, L_BOX, n), "vx": rng.normal(0, 300, n),
               "vy": rng.normal(0, 300, n), "vz": rng.normal(0, 300, n),
               "abs_mag": rng.uniform(-22.5, -19.0, n)})
    t.meta["BOXSIZE"] = L_BOX
    t.meta["REDSHIFT"] = 0.05
    return t


def _file_box(tmp: Path, table: Table | None = None, **changes: Any) -> dict[str, Any]:
    (table if table is not None else _box_table()).write(tmp / "box.fits", overwrite=True)
    d = tiny_dict(**changes)
    d["box"] = {"source": "file", "path": str(tmp / "box.fits"), "los_axis": 2, "rsd": True}
    return d


def _check(d: dict[str, Any]) -> Callable[[Path], list[str]]:
    return lambda tmp: ["check", _write_config(tmp, d)]


def _check_changes(**changes: Any) -> Callable[[Path], list[str]]:
    return _check(tiny_dict(**changes))


def _with_file_box(table_edit: Callable[[Table], Table | None] | None = None,
                   **box_changes: Any) -> Callable[[Path], list[str]]:
    def build(tmp: Path) -> list[str]:
        t = _box_table()
        if table_edit is not None:
            t = table_edit(t) or t
        d = _file_box(tmp, t)
        d["box"].update(box_changes)
        return ["check", _write_config(tmp, d)]
    return build


def _repeated_name(tmp: Path) -> list[str]:
    from astropy.io import fits

    d = _file_box(tmp)
    with fits.open(tmp / "box.fits", mode="update") as hdul:
        hdul[1].header["TTYPE2"] = "x"  # a file whose header names two columns 'x'
    return ["check", _write_config(tmp, d)]


def _garbage(tmp: Path, name: str) -> str:
    path = tmp / name
    path.write_bytes(b"\x00\x01 this is not the file you are looking for" * 10)
    return str(path)


def _mask_case(kind: str) -> Callable[[Path], list[str]]:
    def build(tmp: Path) -> list[str]:
        target = {"missing": str(tmp / "nope.fits"), "dir": str(tmp),
                  "garbage": _garbage(tmp, "mask.fits")}[kind]
        return ["check", _write_config(tmp, tiny_dict(**{"survey.mask": target}))]
    return build


def _mislabelled_ordering(tmp: Path) -> list[str]:
    """The shipped RING mask written with an ORDERING = 'NESTED' header."""
    from conecheck.config import resolve_path
    from conecheck.footprint.fitsio import read_healpix, write_healpix

    ring = read_healpix(resolve_path(tiny_dict()["survey"]["mask"], tmp))
    assert not ring.nest
    write_healpix(tmp / "mask.fits", ring.values, nest=True)
    return ["check", _write_config(tmp, tiny_dict(**{"survey.mask": str(tmp / "mask.fits")}))]


def _overlap_above_one(tmp: Path) -> list[str]:
    import healpy as hp

    m = np.full(hp.nside2npix(16), 2.5)
    hp.write_map(tmp / "overlap.fits", m, overwrite=True, dtype=np.float64)
    return ["check", _write_config(tmp, tiny_dict(
        **{"survey.fibres.overlap_map": str(tmp / "overlap.fits")}))]


def _toml_text(text: str) -> Callable[[Path], list[str]]:
    def build(tmp: Path) -> list[str]:
        (tmp / "c.toml").write_text(text, encoding="utf-8")
        return ["check", str(tmp / "c.toml")]
    return build


def _hod(text: str | None) -> Callable[[Path], list[str]]:
    def build(tmp: Path) -> list[str]:
        path = tmp / "hod.toml"
        if text is not None:
            path.write_text(text, encoding="utf-8")
        return ["check", _write_config(tmp, tiny_dict(**{"box.hod": str(path)}))]
    return build


def _run_into(out: Callable[[Path], str]) -> Callable[[Path], list[str]]:
    def build(tmp: Path) -> list[str]:
        return ["run", "-q", _write_config(tmp, tiny_dict()), "-o", out(tmp)]
    return build


def _file_at(tmp: Path) -> str:
    (tmp / "afile").write_text("x")
    return str(tmp / "afile")


def _results_case(edit: Callable[[dict[str, Any]], None] | str) -> Callable[[Path], list[str]]:
    def build(tmp: Path) -> list[str]:
        run = tmp / "run"
        run.mkdir()
        if isinstance(edit, str):
            (run / "results.json").write_text(edit, encoding="utf-8")
        else:
            r = json.loads(json.dumps(_RESULTS))
            edit(r)
            (run / "results.json").write_text(json.dumps(r), encoding="utf-8")
        return ["report", str(run)]
    return build


#: A minimal, valid results document (one statistic) that the report cases break.
_RESULTS: dict[str, Any] = {
    "conecheck_version": "0", "overall": "pass",
    "samples": {"s": {"cuts": {"c": {"statistics": {"wp": {
        "verdict": "pass", "bins": [1.0, 2.0], "box": [1.0, 2.0], "cone_mean": [1.0, 2.0],
        "cones": [[1.0, 2.0], [1.0, 2.0]], "sigma_box": [0.1, 0.1], "sigma_cone": [0.1, 0.1],
        "sigma_total": [0.1, 0.1], "z": [0.0, 0.0], "max_abs_z": 0.0, "chi2": 0.0,
        "dof": 2, "p_value": 1.0, "detectable_offset": None}}}}}}}


def _set(path: str, value: Any) -> Callable[[dict[str, Any]], None]:
    def edit(r: dict[str, Any]) -> None:
        node = r
        parts = path.split(".")
        for p in parts[:-1]:
            node = node[p]
        node[parts[-1]] = value
    return edit


_STAT = "samples.s.cuts.c.statistics.wp"

#: name -> (builder of argv in a temporary directory, culprit the message must name)
CASES: dict[str, tuple[Callable[[Path], list[str]], str]] = {
    # --- config syntax and structure
    "toml syntax": (_toml_text("seed = [1,\n[box\n"), r"c\.toml"),
    "config missing": (lambda tmp: ["check", str(tmp / "none.toml")], r"none\.toml"),
    "config is a directory": (lambda tmp: ["check", str(tmp)], re.escape("directory")),
    "unknown top-level key": (_check_changes(sed=3), r"sed"),
    "unknown key in section": (_check_changes(**{"cones.n_cone": 3}), r"n_cone"),
    "unknown section": (_check_changes(**{"statistic.wp.rp_min": 1.0}), r"statistic"),
    # --- types
    "n_cones as text": (_check_changes(**{"cones.n_cones": "many"}), r"n_cones"),
    "n_cones as float": (_check_changes(**{"cones.n_cones": 2.5}), r"n_cones"),
    "seed as text": (_check_changes(seed="abc"), r"seed"),
    "measure not a list": (_check_changes(**{"statistics.measure": "wp"}), r"measure"),
    "radii as text": (_check_changes(**{"statistics.vpf.radii": "3 5"}), r"radii"),
    "effects flag as text": (_check_changes(**{"survey.effects.rsd": "yes"}), r"rsd"),
    # --- impossible values
    "n_cones zero": (_check_changes(**{"cones.n_cones": 0}), r"n_cones"),
    "n_cones 1e9": (_check_changes(**{"cones.n_cones": 10**9}), r"n_cones.*--force"),
    "negative seed": (_check_changes(seed=-1), r"seed"),
    "omega_m negative": (_check_changes(**{"cosmology.omega_m": -0.3}), r"omega_m"),
    "shell reversed": (_check_changes(**{"survey.shell.z_min": 0.06,
                                         "survey.shell.z_max": 0.02}), r"z_m(in|ax)"),
    "shell to z 4.9": (_check_changes(**{"survey.shell.z_max": 4.9}), r"z_max.*replicas"),
    "unknown statistic": (_check_changes(**{"statistics.measure": ["wp", "bispectrum"]}),
                          r"bispectrum"),
    "wp rp reversed": (_check_changes(**{"statistics.wp.rp_min": 20.0,
                                         "statistics.wp.rp_max": 1.0}), r"rp_m(in|ax)"),
    "vpf negative radius": (_check_changes(**{"statistics.vpf.radii": [-3.0, 5.0]}),
                            r"radii"),
    "vpf n_spheres 1e10": (_check_changes(**{"statistics.vpf.n_spheres": 10**10}),
                           r"n_spheres.*--force"),
    "cic edges not increasing": (_check_changes(**{"statistics.cic.count_edges": [0, 5, 2]}),
                                 r"count_edges"),
    "box_n_side 200": (_check_changes(**{"jackknife.box_n_side": 200}), r"box_n_side"),
    "sky_regions 1": (_check_changes(**{"jackknife.sky_regions": 1}), r"sky_regions"),
    "scheduler ucx": (_check_changes(**{"compute.scheduler": "ucx://h:1"}), r"scheduler"),
    "scheduler no port": (_check_changes(**{"compute.scheduler": "tcp://host"}),
                          r"scheduler"),
    "workers zero": (_check_changes(**{"compute.workers": 0}), r"workers"),
    "unknown correction": (_check_changes(**{"survey.correction.name": "magic"}), r"magic"),
    "negative velocity error": (_check_changes(**{"survey.redshift_errors.sigma_v_kms": -5.0}),
                                r"sigma_v_kms"),
    "negative fibre angle": (_check_changes(**{"survey.fibres.angle_arcsec": -40.0}),
                             r"angle_arcsec"),
    "unknown placement": (_check_changes(**{"cones.observers.placement": "anywhere"}),
                          r"placement"),
    "observer outside box": (_check_changes(**{"cones.observers.placement": "given",
                                               "cones.observers.positions": [[999.0, 1, 1]]}),
                             r"observers.*outside the box"),
    "randoms multiple zero": (_check_changes(**{"randoms.multiple": 0.0}), r"multiple"),
    "randoms multiple a word": (_check_changes(**{"randoms.multiple": "many"}),
                                r"randoms\.multiple.*auto"),
    "negative z_fail": (_check_changes(**{"verdict.z_fail": -1.0}), r"z_fail"),
    "sample without name": (_check(dict(tiny_dict(), samples=[{"mag_max": -20.0,
                                                              "z_min": 0.02,
                                                              "z_max": 0.05}])), r"name"),
    "sample cut outside shell": (_check_changes(**{"survey.shell.z_max": 0.04}),
                                 r"z_max"),
    "los_axis 3": (_check_changes(**{"box.los_axis": 3}), r"los_axis"),
    # --- files
    "mask missing": (_mask_case("missing"), r"nope\.fits"),
    "mask is a directory": (_mask_case("dir"), r"survey\.mask.*directory"),
    "mask not FITS": (_mask_case("garbage"), r"mask\.fits"),
    "RING mask labelled NESTED": (_mislabelled_ordering,
                                  r"mask\.fits.*ORDERING = 'NESTED'.*looks RING-ordered"),
    "overlap map above one": (_overlap_above_one, r"overlap_map.*\[0, 1\]"),
    "veto missing": (lambda tmp: ["check", _write_config(tmp, tiny_dict(
        **{"survey.vetoes": [str(tmp / "veto.fits")]}))], r"vetoes\[0\]"),
    "hod file missing": (_hod(None), r"box\.hod"),
    "hod file bad TOML": (_hod("log_mmin = = 3\n"), r"hod\.toml"),
    "box path missing": (lambda tmp: ["check", _write_config(tmp, dict(
        _file_box(tmp), box={"source": "file", "path": str(tmp / "gone.fits")}))],
        r"gone\.fits"),
    "box path a directory": (_with_file_box(path="."), r"box\.path.*directory"),
    "box file garbage": (lambda tmp: ["check", _write_config(tmp, dict(
        _file_box(tmp), box={"source": "file", "path": _garbage(tmp, "junk.fits")}))],
        r"junk\.fits"),
    # --- columns and content
    "column mapped twice": (_with_file_box(columns={"x": "x", "y": "x"}),
                            r"'x' is mapped to 2"),
    "column name repeated in the file": (_repeated_name, r"box\.fits.*'x' appear more than"),
    "mapped column absent": (_with_file_box(columns={"x": "xpos"}), r"xpos"),
    "boolean positions": (_with_file_box(lambda t: t.replace_column("x", t["x"] > 80)),
                          r"'x' has dtype bool"),
    "(N, 2) position column": (_with_file_box(
        lambda t: t.replace_column("y", np.column_stack([t["y"], t["y"]]))),
        r"'y' has shape"),
    "NaN position": (_with_file_box(lambda t: t["z"].__setitem__(7, np.nan)),
                     r"'z'.*NaN"),
    "magnitudes 1e30": (_with_file_box(lambda t: t["abs_mag"].__setitem__(3, 1e30)),
                        r"abs_mag"),
    "velocities in m/s": (_with_file_box(lambda t: t["vx"].__setitem__(slice(None), 3e5)),
                          r"velocities"),
    "positions beyond box": (_with_file_box(lambda t: t["x"].__setitem__(0, 5 * L_BOX)),
                             r"positions"),
    "no magnitude column": (_with_file_box(lambda t: t.remove_column("abs_mag")),
                            r"abs_mag"),
    "threshold nobody reaches": (lambda tmp: ["check", _write_config(tmp, _file_box(
        tmp, **{"samples": [dict(tiny_dict()["samples"][0], mag_max=-30.0)]}))],
        r"mag_max = -30"),
    "HOD threshold nobody reaches": (_check(dict(tiny_dict(), samples=[dict(
        tiny_dict()["samples"][0], mag_max=-30.0)])), r"mag_max = -30.*HOD expects"),
    "pair work above the limit": (_check_changes(**{"cones.n_cones": 9000,
                                                    "randoms.multiple": 400.0}),
                                  r"core-hours.*--force"),
    "negative box size": (_with_file_box(box_size=-5.0), r"box_size"),
    # --- output directories
    "output is a file": (_run_into(_file_at), r"afile"),
    "output under a file": (_run_into(lambda tmp: _file_at(tmp) + "/sub"), r"afile"),
    # --- report inputs
    "report dir missing": (lambda tmp: ["report", str(tmp / "nope")], r"nope"),
    "results not JSON": (_results_case("{not json"), r"results\.json"),
    "results missing keys": (_results_case(_set("samples.s.cuts.c.statistics.wp",
                                                {"verdict": "pass"})), r"missing key"),
    "results cones a dict": (_results_case(_set(f"{_STAT}.cones", {"a": 1})), r"cones"),
    "results provenance a list": (_results_case(_set("provenance", [1])), r"provenance"),
    "results max_abs_z text": (_results_case(_set(f"{_STAT}.max_abs_z", "big")), r"max_abs_z"),
    "results bins length": (_results_case(_set(f"{_STAT}.box", [1.0])), r"box: 1 values"),
    "results bad verdict": (_results_case(_set("overall", "great")), r"overall"),
    # --- mask tools
    "mask info missing": (lambda tmp: ["mask", "info", str(tmp / "m.fits")], r"m\.fits"),
}


@pytest.mark.parametrize("name", list(CASES))
def test_bad_input_exits_2_and_names_the_culprit(name, tmp_path, capsys):
    build, culprit = CASES[name]
    argv = build(tmp_path)
    code = main(argv)
    err = capsys.readouterr().err
    assert code == 2, f"{name}: exit {code}\n{err}"
    assert "Traceback" not in err, err
    assert re.search(culprit, err, re.S), f"{name}: {culprit!r} not in:\n{err}"


def test_corpus_is_wide():
    """The issue asks for at least 60 cases across the failure classes."""
    assert len(CASES) >= 60


# --------------------------------------------------------------------------- schedulers
def _serve(reply: bytes | None) -> tuple[socket.socket, int]:
    """A TCP service on a free port: sends ``reply`` to each client, or never answers."""
    srv = socket.socket()
    srv.bind(("127.0.0.1", 0))
    srv.listen(8)

    def loop() -> None:
        held = []
        while True:
            try:
                conn, _ = srv.accept()
            except OSError:
                return
            held.append(conn)  # kept open: a silent peer
            if reply is not None:
                try:
                    conn.sendall(reply)
                except OSError:
                    pass

    threading.Thread(target=loop, daemon=True).start()
    return srv, srv.getsockname()[1]


@pytest.mark.parametrize("reply, message", [
    (b"HTTP/1.0 200 OK\r\nContent-Length: 5\r\n\r\nhello" * 20, "not a dask scheduler"),
    (None, "no answer within"),
])
def test_scheduler_that_is_not_dask_is_refused_quickly(reply, message):
    srv, port = _serve(reply)
    try:
        with pytest.raises(InputError, match=f"127.0.0.1:{port}.*{message}"):
            DaskExecutor(f"tcp://127.0.0.1:{port}", connect_timeout=2.0)
    finally:
        srv.close()


def test_cli_scheduler_error_exits_2(tmp_path, capsys):
    srv, port = _serve(b"\xff" * 64)
    try:
        code = main(["run", "-q", _write_config(tmp_path, tiny_dict()),
                     "--scheduler", f"tcp://127.0.0.1:{port}"])
    finally:
        srv.close()
    err = capsys.readouterr().err
    assert code == 2 and "Traceback" not in err and f"127.0.0.1:{port}" in err, err


def test_partial_files_of_a_killed_writer_are_removed(tmp_path):
    from conecheck.atomic import PARTIAL_MARK, atomic_path, remove_partial_files

    left = tmp_path / f".validation{PARTIAL_MARK}abc.pdf"
    left.write_bytes(b"%PDF half")
    (tmp_path / "validation.pdf").write_bytes(b"kept")
    with atomic_path(tmp_path / "results.json") as tmp:
        assert PARTIAL_MARK in tmp.name  # what a SIGKILL would leave carries the mark
        tmp.write_text("{}")
    assert remove_partial_files(tmp_path) == 1
    assert sorted(p.name for p in tmp_path.iterdir()) == ["results.json", "validation.pdf"]
    shutil.rmtree(tmp_path)


def test_force_turns_resource_limits_into_notes(tmp_path, capsys):
    cfg = _write_config(tmp_path, tiny_dict(**{"cones.n_cones": 9000,
                                               "randoms.multiple": 400.0}))
    assert main(["check", cfg, "--force"]) == 0
    err = capsys.readouterr().err
    assert re.search(r"forced past a limit: .*core-hours", err), err


def test_a_closed_output_pipe_ends_quietly():
    """`conecheck mask info MASK | head`: no traceback, no error, the shell's SIGPIPE code."""
    import subprocess
    import sys

    from conecheck.config import resolve_path

    mask = str(resolve_path("builtin:kestrel"))
    p = subprocess.Popen([sys.executable, "-m", "conecheck.cli", "mask", "info", mask],
                         stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    assert p.stdout is not None and p.stderr is not None
    p.stdout.close()  # the reader goes away while the interpreter is still starting
    err = p.stderr.read().decode()
    assert p.wait() == 141, err
    assert "Traceback" not in err and "error" not in err, err
