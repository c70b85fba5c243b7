"""Cache keys are derived from what each task reads (conecheck.run.specs).

One run fills a task cache; then each input a task reads is changed on its own — a setting,
the seed, the content of the box catalogue, of the mask and of the fibre overlap map — and
the test checks which tasks the next run computes: exactly those that read the input, on
every cone. Changing one sample's threshold recomputes nothing of the other sample, and a
setting no task reads (a statistic that is not measured) recomputes nothing.
"""

from __future__ import annotations

import inspect
import json
import re

import healpy as hp
import numpy as np
import pytest
from astropy.table import Table
from run_helpers import tiny_dict

from conecheck.config import RunConfig, config_from_dict
from conecheck.footprint import Footprint, demo_mask_path, demo_overlap_path
from conecheck.run import pipeline, sensitivity, tasks
from conecheck.run.inputs import load_box
from conecheck.run.validate import validate

N_CONES = 2
BOX = {("box", "broad", ""), ("box", "luminous", "")}
CUTS = {("broad", "primary"), ("luminous", "primary"), ("luminous", "near")}
RANDOMS = {("randoms", s, c) for s, c in CUTS}
PIECES = {("cone-piece", s, c) for s, c in CUTS}
EVERYTHING = BOX | RANDOMS | PIECES


def _write_box(path, box, shift=None):
    pos = np.array(box.position)
    if shift is not None:
        pos[0] = (pos[0] + shift) % box.box_size
    t = Table({"x": pos[:, 0], "y": pos[:, 1], "z": pos[:, 2], "vx": box.velocity[:, 0],
               "vy": box.velocity[:, 1], "vz": box.velocity[:, 2], "abs_mag": box.abs_mag})
    t.meta["BOXSIZE"] = box.box_size
    t.meta["REDSHIFT"] = box.redshift
    t.write(path, overwrite=True)


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """A galaxy file, a mask and an overlap map of our own, plus altered copies of each."""
    root = tmp_path_factory.mktemp("inputs")
    box = load_box(config_from_dict(tiny_dict(one_sample=False), "t"))
    _write_box(root / "box.fits", box)
    _write_box(root / "box_moved.fits", box, shift=np.array([1.0, 0.0, 0.0]))
    mask = Footprint.from_fits(demo_mask_path())
    mask.write_fits(root / "mask.fits")
    values = np.array(mask.values)
    inside = np.flatnonzero(values > 0.5)
    values[inside[len(inside) // 2]] *= 0.5  # one pixel's completeness halved
    Footprint(values, nest=mask.nest).write_fits(root / "mask_edited.fits")
    overlap = hp.read_map(demo_overlap_path())
    hp.write_map(root / "overlap.fits", overlap, dtype=np.float64)
    edited = np.array(overlap)
    edited[np.flatnonzero(edited > 0)[0]] = 0.0  # one pixel loses its second pass
    hp.write_map(root / "overlap_edited.fits", edited, dtype=np.float64)
    return root, box


def _base(files):
    root, box = files
    d = tiny_dict(one_sample=False, seed=31)
    d["box"] = {"source": "file", "path": str(root / "box.fits"), "box_size": box.box_size,
                "redshift": box.redshift, "rsd": True}
    d["survey"]["mask"] = str(root / "mask.fits")
    d["survey"]["fibres"]["overlap_map"] = str(root / "overlap.fits")
    d["statistics"]["measure"] = ["number_density", "wp"]
    d["cones"]["n_cones"] = N_CONES
    return d


def _entries(run_dir):
    out = {}
    for p in (run_dir / "cache").glob("??/*.json"):
        doc = json.loads(p.read_text(encoding="utf-8"))
        out[doc["key"]] = (doc["kind"], doc["label"])
    return out


def _what(entries):
    """(kind, sample, cut) of each entry; cone pieces must come from every cone."""
    got, cones = set(), {}
    for kind, label in entries:
        if kind == "box":
            got.add(("box", re.search(r"sample (\S+)", label).group(1), ""))
        elif kind == "randoms":
            m = re.search(r"sample (\S+) / cut (\S+)", label)
            got.add(("randoms", m.group(1), m.group(2)))
        elif kind == "cone-piece":
            i, s, c = re.fullmatch(r"cone (\d+) / (\S+) / (\S+)", label).groups()
            got.add(("cone-piece", s, c))
            cones.setdefault((s, c), set()).add(int(i))
    assert all(v == set(range(N_CONES)) for v in cones.values()), cones
    return got


def _change(d, key, value):
    node = d
    *path, last = key.split(".")
    for p in path:
        node = node[p]
    node[last] = value


# (what changes, value, what must be computed again)
CHANGES = [
    ("seed", 32, EVERYTHING),
    ("cosmology.omega_m", 0.31, EVERYTHING),
    ("box.path", "box_moved.fits", BOX | PIECES),  # the catalogue's content
    ("box.rsd", False, BOX),
    ("statistics.wp.pi_max", 15.0, EVERYTHING),
    ("statistics.cic.r_cyl", 3.0, set()),  # not measured: no task reads it
    ("jackknife.box_n_side", 4, BOX),
    ("jackknife.sky_regions", 12, RANDOMS | PIECES),
    ("randoms.multiple", 6.0, RANDOMS | PIECES),
    ("survey.mask", "mask_edited.fits", RANDOMS | PIECES),  # the mask's content
    ("survey.fibres.overlap_map", "overlap_edited.fits", PIECES),  # the map's content
    ("survey.shell.m_lim", 16.5, PIECES),
    ("survey.redshift_errors.sigma_v_kms", 50.0, PIECES),
    ("survey.correction.name", "none", PIECES),
    # read only by statistics that count in cells, none measured here
    ("survey.completeness.treatment", "weight", set()),
    ("samples.1.mag_max", -21.2, {("box", "luminous", "")}
     | {x for x in RANDOMS | PIECES if x[1] == "luminous"}),
]


def test_each_input_a_task_reads_recomputes_exactly_the_tasks_that_read_it(files, tmp_path):
    root, _ = files
    run_dir = tmp_path / "run"

    def run(d):
        before = _entries(run_dir) if (run_dir / "cache").exists() else {}
        validate(config_from_dict(d, "t", root), run_dir, progress=False)
        after = _entries(run_dir)
        return _what(v for k, v in after.items() if k not in before)

    assert run(_base(files)) == EVERYTHING
    assert run(_base(files)) == set()
    wrong = {}
    for key, value, expected in CHANGES:
        d = _base(files)
        if key.startswith("samples."):
            _, i, name = key.split(".")
            d["samples"][int(i)][name] = value
        else:
            if isinstance(value, str) and value.endswith(".fits"):
                value = str(root / value)
            _change(d, key, value) if "." in key else d.update({key: value})
        got = run(d)
        if got != expected:
            wrong[key] = {"missing": sorted(expected - got), "extra": sorted(got - expected)}
    assert not wrong, wrong


@pytest.mark.parametrize("func", [tasks.box_task, tasks.randoms_task, tasks.cone_task,
                                  sensitivity.hod_derivatives_task])
def test_no_task_receives_the_run_configuration(func):
    # a task sees its spec and the inputs the spec names by content, never the whole run
    # configuration: what is not in its key cannot reach it
    hints = inspect.signature(func).parameters
    assert all("RunConfig" not in str(p.annotation) for p in hints.values()), func
    first = next(iter(hints.values()))
    assert first.name == "spec", func
    assert RunConfig.__name__ not in (inspect.getsource(func))
    assert pipeline.spec_key  # the stages key every task by its spec
