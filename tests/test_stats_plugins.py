"""Users' own statistics: a plug-in package registers one through the entry-point group
``conecheck.statistics`` and it runs end to end, on a dask LocalCluster's workers too.

The plug-in is a test distribution written to a temporary directory (a module and a
``.dist-info`` with ``entry_points.txt``, which is what ``pip install`` leaves behind) and
put on ``PYTHONPATH`` of fresh processes, so nothing is installed into the environment.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest
import tomli_w
from run_helpers import tiny_dict

PLUGIN = '''
"""A user's statistic: the mean number of neighbours within a sphere around each galaxy."""
from dataclasses import dataclass

import numpy as np

from conecheck.pairs import neighbours_box, neighbours_cone
from conecheck.stats import Display, Measurement, Statistic


@dataclass(frozen=True)
class MeanNeighboursSettings:
    """Mean neighbour count.

    Attributes
    ----------
    radius : float
        Sphere radius [Mpc/h].
    """

    radius: float = 3.0


def _mean(counts, w, region, k):
    value = np.array([np.sum(w * counts) / w.sum()])
    delete_one = None
    if k:
        wk = np.bincount(region, weights=w, minlength=k)
        ck = np.bincount(region, weights=w * counts, minlength=k)
        delete_one = ((np.sum(w * counts) - ck) / (w.sum() - wk))[:, None]
    return Measurement("mean_neighbours", np.array([0.0]), value, delete_one,
                       value_label="mean N(<R)")


class MeanNeighbours(Statistic):
    name = "mean_neighbours"
    settings_type = MeanNeighboursSettings
    display = Display(title="mean neighbours N(<R)", short="mean N(<R)", symbol="N_R",
                      order=90)

    def n_bins(self, settings=None):
        return 1

    def measure_box(self, sample, settings=None, rng=None, *, jackknife=None):
        s = self.settings_or_default(settings)
        c = neighbours_box(sample.position, weights=sample.w, box_size=sample.box_size,
                           los_axis=sample.los_axis, edges=[0.0, s.radius])[:, 0]
        return _mean(c, sample.w, sample.region, sample.n_regions if jackknife else 0)

    def measure_cone(self, sample, randoms, geometry, settings=None, rng=None, shared=None, *,
                     jackknife=None):
        s = self.settings_or_default(settings)
        c = neighbours_cone(sample.xyz, weights=sample.w, edges=[0.0, s.radius])[:, 0]
        return _mean(c, sample.w, sample.region, sample.n_regions if jackknife else 0)


STATISTIC = MeanNeighbours()
'''


def _site(tmp_path: Path, body: str = PLUGIN, target: str = "tinystat:STATISTIC") -> Path:
    site = tmp_path / "site"
    (site / "tinystat").mkdir(parents=True)
    (site / "tinystat" / "__init__.py").write_text(textwrap.dedent(body))
    info = site / "tinystat-0.1.dist-info"
    info.mkdir()
    (info / "METADATA").write_text("Metadata-Version: 2.1\nName: tinystat\nVersion: 0.1\n")
    (info / "entry_points.txt").write_text(
        f"[conecheck.statistics]\nmean_neighbours = {target}\n")
    return site


#: The command line in a fresh process.
CLI = [sys.executable, "-c", "import sys; from conecheck.cli import main; sys.exit(main())"]


def _env(site: Path) -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(site), env.get("PYTHONPATH", "")])
    return env


def _python(code: str, site: Path) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-c", code], env=_env(site), capture_output=True,
                          text=True, timeout=300)


def test_an_entry_point_registers_a_statistic(tmp_path):
    site = _site(tmp_path)
    out = _python("from conecheck.stats.registry import STATISTICS, ORIGINS, LOAD_PROBLEMS\n"
                  "print(ORIGINS['mean_neighbours'], list(STATISTICS)[-1], LOAD_PROBLEMS)",
                  site)
    assert out.returncode == 0, out.stderr
    assert out.stdout.split() == ["tinystat", "mean_neighbours", "[]"]


def test_a_broken_plug_in_is_reported_and_the_others_still_load(tmp_path):
    site = _site(tmp_path, "raise ImportError('a missing dependency')\n")
    out = _python("from conecheck.stats.registry import STATISTICS, LOAD_PROBLEMS\n"
                  "print('wp' in STATISTICS, 'mean_neighbours' in STATISTICS)\n"
                  "print(LOAD_PROBLEMS[0])", site)
    assert out.returncode == 0, out.stderr
    first, problem = out.stdout.splitlines()
    assert first == "True False"
    assert "mean_neighbours" in problem and "a missing dependency" in problem


def test_a_plug_in_statistic_runs_end_to_end_on_dask_workers(tmp_path):
    pytest.importorskip("distributed")
    site = _site(tmp_path)
    d = tiny_dict(seed=21)
    d["statistics"]["measure"] = ["number_density", "mean_neighbours"]
    d["statistics"]["mean_neighbours"] = {"radius": 4.0}
    cfg = tmp_path / "run.toml"
    cfg.write_text(tomli_w.dumps(d))
    env = _env(site)
    check = subprocess.run([*CLI, "check", str(cfg)], env=env,
                           capture_output=True, text=True, timeout=300)
    assert check.returncode == 0, check.stderr
    assert "mean_neighbours (tinystat)" in check.stderr
    run = subprocess.run([*CLI, "run", str(cfg), "-q", "-o",
                          str(tmp_path / "out"), "--scheduler", "local-cluster",
                          "--workers", "2"], env=env, capture_output=True, text=True,
                         timeout=600)
    assert run.returncode in (0, 1), run.stderr  # a verdict, not unusable input
    results = json.loads((tmp_path / "out" / "results.json").read_text())
    stats = results["samples"]["broad"]["cuts"]["primary"]["statistics"]
    entry = stats["mean_neighbours"]
    assert entry["verdict"] in ("pass", "warn", "fail")
    assert len(entry["cones"]) == d["cones"]["n_cones"] and entry["box"][0] > 0
