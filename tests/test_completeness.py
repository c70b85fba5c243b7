"""Coverage versus completeness for the statistics that count in cells
(conecheck.footprint.coverage): a uniformly incomplete survey must measure the VPF and the
counts in cylinders of the box diluted to the same completeness."""

from __future__ import annotations

import numpy as np
import pytest
from cone_helpers import COSMO, cap_footprint, poisson_box, survey
from scipy.integrate import quad

from conecheck.cone import SurveyShell, build_cone
from conecheck.cone.build import cone_rngs
from conecheck.cone.settings import CompletenessSettings
from conecheck.errors import InputError
from conecheck.footprint.coverage import (
    box_dilution,
    count_weights,
    covered_sky,
    mean_completeness,
)
from conecheck.run.tasks import count_sample
from conecheck.stats import BoxSample, ConeGeometry
from conecheck.stats.cic import CicSettings, cic_box, cic_cone
from conecheck.stats.vpf import VpfSettings, vpf_box, vpf_cone

N_BOX, L = 160_000, 250.0           # n = 1.02e-2 (h/Mpc)^3, Poisson
DENSITY = N_BOX / L**3
COMPLETENESS = 0.9
RADII = (2.0, 3.0, 4.0)


class _Regions:
    """One sky region: the statistics here are checked without jackknife."""

    k = 1

    def region_of(self, ra, dec):
        return np.zeros(np.shape(ra), dtype=np.int64)


@pytest.fixture(scope="module")
def incomplete_cone():
    """A Poisson box seen through a 35° cap of uniform completeness 0.9 (real space)."""
    box = poisson_box(N_BOX, L, seed=21)
    fp = cap_footprint(16, 40.0, 30.0, 35.0, value=COMPLETENESS)
    shell = SurveyShell(z_min=0.015, z_max=0.04)
    sv = survey(fp, rsd=False, errors=False, fibres=False, flux=False, shell=shell)
    cone, _ = build_cone(box, sv, [125.0, 125.0, 125.0], None, cone_rngs(4, 0))
    lo, hi = (float(x) for x in COSMO.comoving_distance([0.015, 0.04]))
    return box, fp, cone, lo, hi


def _geometry(fp, lo, hi, settings):
    return ConeGeometry(fp, lo, hi, _Regions(), coverage=covered_sky(fp, settings))


def test_rules_of_coverage_and_weights():
    vals = np.array([0.0, 0.3, 0.9, 1.0])
    fp = cap_footprint(8, 0.0, 0.0, 20.0)
    dilute = CompletenessSettings()
    keep, w = count_weights(vals, np.ones(4), dilute)
    assert keep.tolist() == [False, True, True, True] and w.tolist() == [1, 1, 1]
    keep, w = count_weights(vals, np.full(4, 2.0), CompletenessSettings(treatment="weight"))
    np.testing.assert_allclose(w, [2 / 0.3, 2 / 0.9, 2.0])
    keep, _ = count_weights(vals, np.ones(4), CompletenessSettings(treatment="threshold",
                                                                   threshold=0.85))
    assert keep.tolist() == [False, False, True, True]
    # a complete footprint is its own coverage (no change for complete surveys)
    assert covered_sky(fp, dilute) is fp
    half = cap_footprint(8, 0.0, 0.0, 20.0, value=0.5)
    assert covered_sky(half, dilute).values.max() == 1.0
    assert mean_completeness(half, dilute) == pytest.approx(0.5)
    assert box_dilution(half, CompletenessSettings(treatment="weight")) == 1.0
    with pytest.raises(InputError, match="treatment"):
        CompletenessSettings(treatment="ignore")


def _vpf_sigma(p0: float, n_used: int, radius: float, density: float,
               v_centres: float) -> float:
    """σ of the fraction of empty spheres among ``n_used`` overlapping random spheres of a
    Poisson field of ``density``, centres uniform in a volume ``v_centres``.

    Var = P₀(1 − P₀)/n_s + (1/V) ∫₀^{2R} 4π d² P₀² (e^{n V∩(d)} − 1) dd: the binomial term
    of the sphere draws plus the covariance of two spheres' emptiness, P(both empty) −
    P₀² = P₀² (e^{n V∩} − 1) for a Poisson field, with the lens volume of two spheres at
    separation d, V∩ = π (4R + d)(2R − d)²/12 (edges neglected).
    """
    def lens(d: float) -> float:
        return np.pi / 12.0 * (4 * radius + d) * (2 * radius - d) ** 2
    cov = quad(lambda d: 4 * np.pi * d * d * p0 * p0 * np.expm1(density * lens(d)),
               0.0, 2 * radius)[0]
    return float(np.sqrt(p0 * (1 - p0) / n_used + cov / v_centres))


def test_vpf_of_an_incomplete_survey_is_the_diluted_poisson_law(incomplete_cone):
    """P₀(R) = exp(−c n V) for a Poisson field thinned at random with probability c
    (Peebles 1980, The Large-Scale Structure of the Universe, §36: Poisson P₀ = e^{−nV};
    random thinning keeps a Poisson process Poisson at density c n). Margin: 4 σ of
    :func:`_vpf_sigma` (over four other seeds the deviations were within 2.3 σ; the
    undiluted law was off by 3.4–7.4 σ).
    """
    box, fp, cone, lo, hi = incomplete_cone
    settings = CompletenessSettings()
    vs = VpfSettings(radii=RADII, n_spheres=20000)
    geo = _geometry(fp, lo, hi, settings)
    data = count_sample(cone, _Regions(), settings)
    m = vpf_cone(data, geo, vs, np.random.default_rng(1), jackknife=False)
    volume = 4.0 / 3.0 * np.pi * np.asarray(RADII) ** 3
    expected = np.exp(-COMPLETENESS * DENSITY * volume)
    n_used = np.asarray(m.extra["n_spheres_used"])
    v_cone = covered_sky(fp, settings).area_sr / 3.0 * (hi**3 - lo**3)
    sigma = np.array([_vpf_sigma(expected[i], n_used[i], r, COMPLETENESS * DENSITY,
                                 v_cone * n_used[i] / vs.n_spheres)
                      for i, r in enumerate(RADII)])
    assert np.all(np.abs(m.value - expected) < 4 * sigma), (m.value, expected, sigma)
    # the undiluted law is rejected (the check can fail)
    assert np.max(np.abs(m.value - np.exp(-DENSITY * volume)) / sigma) > 3
    # the box diluted by the covered sky's mean completeness agrees too (centres in L³)
    c = box_dilution(fp, settings)
    assert c == pytest.approx(COMPLETENESS)
    keep = np.random.default_rng(2).random(len(box)) < c
    mb = vpf_box(BoxSample(box.position[keep], L), vs, np.random.default_rng(3),
                 jackknife=False)
    sb = np.array([_vpf_sigma(expected[i], vs.n_spheres, r, COMPLETENESS * DENSITY, L**3)
                   for i, r in enumerate(RADII)])
    assert np.all(np.abs(mb.value - expected) < 4 * sb), (mb.value, expected, sb)


def test_reading_completeness_as_coverage_finds_no_sphere(incomplete_cone):
    # The inside test on the completeness map itself (0.9 < min_inside_fraction 0.99)
    # rejects every sphere: the failure this treatment removes.
    _, fp, cone, lo, hi = incomplete_cone
    geo = ConeGeometry(fp, lo, hi, _Regions())
    data = count_sample(cone, _Regions(), CompletenessSettings())
    with pytest.raises(InputError):
        vpf_cone(data, geo, VpfSettings(radii=RADII, n_spheres=500),
                 np.random.default_rng(1), jackknife=False)


@pytest.mark.parametrize("treatment", ["dilute", "weight"])
def test_counts_in_cylinders_mean_follows_the_treatment(incomplete_cone, treatment):
    """Mean neighbour count in a cylinder around a galaxy of a Poisson field: n V_cyl
    (the Palm distribution of a Poisson process is the process plus the point, Slivnyak's
    theorem); thinned at random, μ = c n V_cyl; with 1/c weights, n V_cyl again.

    σ of the mean over N centres: the counts sum to twice the number of close pairs, a
    U-statistic of variance ⟨pairs⟩(1 + 2μ) for uniform points, so σ = √(2μ(1 + 2μ)/N)
    (divided by c with the weights). Margin 4 σ (four other seeds: within 0.9 σ).
    """
    box, fp, cone, lo, hi = incomplete_cone
    settings = CompletenessSettings(treatment=treatment)
    cs = CicSettings(r_cyl=3.0, half_length=10.0, max_count=40)
    geo = _geometry(fp, lo, hi, settings)
    m = cic_cone(count_sample(cone, _Regions(), settings), geo, cs, jackknife=False)
    v_cyl = np.pi * cs.r_cyl**2 * 2 * cs.half_length
    mu = COMPLETENESS * DENSITY * v_cyl
    scale = COMPLETENESS if treatment == "weight" else 1.0

    def sigma(n: int) -> float:
        return float(np.sqrt(2 * mu * (1 + 2 * mu) / n)) / scale

    assert abs(m.extra["mean_count"] - mu / scale) < 4 * sigma(m.extra["n_centres"]), (
        m.extra["mean_count"], mu / scale)
    # the box side under the same treatment: diluted (dilute) or whole (weight)
    keep = np.random.default_rng(5).random(len(box)) < box_dilution(fp, settings)
    mb = cic_box(BoxSample(box.position[keep], L), cs, jackknife=False)
    mu_box = mu / scale
    sb = float(np.sqrt(2 * mu_box * (1 + 2 * mu_box) / mb.extra["n_centres"]))
    assert abs(mb.extra["mean_count"] - mu_box) < 4 * sb


def test_ladder_cap_keeps_the_effective_area_at_the_mean_completeness():
    from conecheck.run.inputs import cap_footprint as ladder_cap
    fp = cap_footprint(16, 40.0, 30.0, 25.0, value=COMPLETENESS)
    cap = ladder_cap(fp, COMPLETENESS)
    assert set(np.unique(cap.values)) == {0.0, COMPLETENESS}
    # same effective area to within the pixels on the rim (N_side 16: 13 deg² each)
    assert abs(cap.area_deg2 - fp.area_deg2) < 0.03 * fp.area_deg2
