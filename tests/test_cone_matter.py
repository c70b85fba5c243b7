"""Matter carried into a cone: every particle a galaxy can reach, and only near the survey."""

from __future__ import annotations

import numpy as np
from run_helpers import tiny_dict

import conecheck as cc
from conecheck.cone.build import SurveyModel
from conecheck.run.cache import content_digest
from conecheck.run.inputs import overlap_input
from conecheck.run.specs import cone_build_spec
from conecheck.run.tasks import cone_matter


def test_pruned_matter_gives_the_lensing_of_all_the_matter(tmp_path, monkeypatch):
    """ΔΣ of a cone's galaxies is the same with the particles kept near the footprint as
    with every particle of the shell (the pruning only drops what no galaxy reaches)."""
    cfg = cc.config_from_dict(tiny_dict(seed=7, **{"statistics.measure": ["delta_sigma"]}),
                              "t", tmp_path)
    box = cc.build_box(cfg)
    fp, _ = cc.survey_sky(cfg)
    spec = cone_build_spec(cfg, 0, content_digest(box), content_digest(fp), overlap_input(cfg))
    reach = cfg.statistics.matter_reach
    near = cone_matter(spec, box, fp, reach)
    monkeypatch.setattr(SurveyModel, "coverage", lambda self: None)
    everything = cone_matter(spec, box, fp, reach)
    monkeypatch.undo()
    assert 0 < len(near) < 0.8 * len(everything)  # the footprint is a small part of the sky
    cone = cc.build_cones(box, cfg, n=1)[0]
    a = cc.measure_cone(cone, "delta_sigma", config=cfg, matter=near)
    b = cc.measure_cone(cone, "delta_sigma", config=cfg, matter=everything)
    # the same pairs: equal up to the order of the sums
    np.testing.assert_allclose(a.value, b.value, rtol=1e-12)
    np.testing.assert_allclose(a.delete_one, b.delete_one, rtol=1e-12)
    assert np.all(a.value != 0)
