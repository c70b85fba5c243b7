"""The full target list: faint targets filled in to a luminosity function's density.

References: the Schechter (1976, ApJ 203, 297) luminosity function and its integral
(checked against φ* Γ(α+1, x) in test_cone_photometry); Campbell's theorem for the
variance of a sum over a Poisson process (e.g. Daley & Vere-Jones 2003, An Introduction
to the Theory of Point Processes, §6.1); fibre assignment checked against a brute-force
pair search and maximum independent sets by enumeration.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from cone_helpers import COSMO, cap_footprint, separations_arcsec
from run_helpers import tiny_dict
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from conecheck.catalog import GalaxyBox
from conecheck.cone import SurveyModel
from conecheck.cone.build import build_cone, cone_rngs
from conecheck.cone.photometry import expected_targets_per_sr
from conecheck.cone.settings import (
    CorrectionSettings,
    EffectSwitches,
    FibreSettings,
    LuminosityFunction,
    SurveyShell,
    TargetSettings,
)
from conecheck.cone.targets import _cumulative_table
from conecheck.config import config_from_dict
from conecheck.errors import InputError

LF = LuminosityFunction()  # Blanton et al. 2003 r band (values from memory)
M_BOX = -19.0
L_BOX = 380.0


def lf_box(seed: int, box_size: float = L_BOX, clustered: bool = False) -> GalaxyBox:
    """A box complete brighter than M_BOX with the luminosity function's density and
    magnitudes (inverse transform of the tabulated cumulative LF); Poisson positions, or
    Gaussian clumps of 8 around Poisson centres when ``clustered``."""
    rng = np.random.default_rng(seed)
    n = rng.poisson(LF.density_brighter(M_BOX) * box_size**3)
    if clustered:
        parents = rng.uniform(0.0, box_size, (n // 8, 3))
        pos = np.mod(np.repeat(parents, 8, axis=0) + rng.normal(0, 0.5, (n // 8 * 8, 3)),
                     box_size)
        n = len(pos)
    else:
        pos = rng.uniform(0.0, box_size, (n, 3))
    grid, total = _cumulative_table(LF, -25.0, M_BOX)
    mag = np.interp(rng.random(n) * total[-1], total, grid)
    return GalaxyBox(pos, np.zeros((n, 3)), box_size, 0.0, abs_mag=mag)


def model(source: str, shell: SurveyShell, *, fibres: bool = True, footprint=None,
          angle: float = 1e-3) -> SurveyModel:
    """Cones with fibres on (fill targets exist only when something acts on them), by
    default at an angle too small for any collision, so only the target list changes."""
    fx = EffectSwitches(rsd=False, redshift_errors=False, footprint=footprint is not None,
                        fibres=fibres, physical_fluxes=False)
    return SurveyModel(cosmology=COSMO, shell=shell, footprint=footprint, effects=fx,
                       fibres=FibreSettings(angle_arcsec=angle, overlap_fraction=0.0),
                       correction=CorrectionSettings("nearest_redshift"),
                       targets=TargetSettings(source=source), luminosity_function=LF)


def test_filled_target_density_matches_the_luminosity_function_integral():
    """Box plus fill targets in the shell = ∫ dV n_LF(< M_lim(z)) to 1 %.

    The expected count N_LF is the luminosity function integrated over the shell's volume
    (``expected_targets_per_sr`` × 4π, full sky). The realised count is a sum over hosts of
    (1 if the host is a target) + (its Poisson number of fill targets); for hosts of a
    Poisson process Campbell's theorem gives Var N = E Σ_hosts c_i², estimated by the
    realised Σ c_i² (c_i the targets of host i). The test requires that 1 % is at least 4σ
    (so a pass is not luck) and that |N − N_LF| < 1 %.
    """
    shell = SurveyShell(z_min=0.01, z_max=0.06, m_lim=17.0)
    box = lf_box(1)
    o = [L_BOX / 2] * 3
    _, info = build_cone(box, model("fill", shell), o, None, cone_rngs(3, 0), keep_targets=True)
    t = info["targets"]
    z = np.asarray(t["z_obs"])
    inside = (z >= shell.z_min) & (z < shell.z_max)
    n_lf = expected_targets_per_sr(LF, shell, COSMO) * 4 * np.pi
    n = int(inside.sum())
    _, per_host = np.unique(np.column_stack([np.asarray(t["box_index"])[inside],
                                             np.asarray(t["replica"])[inside]]),
                            axis=0, return_counts=True)
    sigma = np.sqrt(np.sum(per_host.astype(float) ** 2)) / n_lf
    assert 4 * sigma < 0.01, sigma
    assert abs(n / n_lf - 1) < 0.01, (n, n_lf, sigma)
    assert info["n_fill_in_shell"] == int(np.sum(np.asarray(t["fill_target"])[inside]))
    # without the fill the box alone falls far short (so the check above can fail)
    _, alone = build_cone(box, model("box", shell), o, None, cone_rngs(3, 0))
    assert 1 - alone["n_targets_in_shell"] / n_lf > 0.2


def test_fill_targets_never_enter_the_cone():
    """Fill targets act only through fibres: with no collision possible (a 0.001″ angle) the
    cone is the box-only one, column for column."""
    shell = SurveyShell(z_min=0.01, z_max=0.03, m_lim=16.5)
    box = lf_box(2, 200.0)
    o = [100.0] * 3
    filled, info = build_cone(box, model("fill", shell), o, None, cone_rngs(5, 0))
    plain, _ = build_cone(box, model("box", shell), o, None, cone_rngs(5, 0))
    assert info["n_fill_targets"] > 0
    assert filled.colnames == plain.colnames and "fill_target" not in filled.colnames
    for c in plain.colnames:
        np.testing.assert_array_equal(filled[c], plain[c])


def brute_force_first_pass(ra: np.ndarray, dec: np.ndarray, angle_arcsec: float) -> int:
    """Targets a maximum first pass fibres: Σ over collision groups of the size of the
    group's maximum independent set, with every pair found by direct separations and
    every group solved by enumerating its subsets."""
    n = len(ra)
    pairs = []
    for i0 in range(0, n, 2000):  # all pairs, in blocks (no tree)
        sep = separations_arcsec(ra[i0:i0 + 2000], dec[i0:i0 + 2000], ra, dec)
        i, j = np.nonzero(sep < angle_arcsec)
        i = i + i0
        keep = i < j
        pairs.append(np.column_stack([i[keep], j[keep]]))
    p = np.concatenate(pairs)
    adj = coo_matrix((np.ones(len(p)), (p[:, 0], p[:, 1])), shape=(n, n))
    _, label = connected_components(adj, directed=False)
    total = 0
    edges = {tuple(e) for e in p.tolist()}
    for g in np.unique(label[p[:, 0]]):
        members = np.flatnonzero(label == g).tolist()
        assert len(members) <= 10, "a group too large to enumerate"
        best = max(k for k in range(1, len(members) + 1)
                   for sub in itertools.combinations(members, k)
                   if not any((a, b) in edges for a, b in itertools.combinations(sub, 2)))
        total += best
    singles = n - np.unique(p).size
    return total + singles


def test_collided_fraction_of_the_filled_list_matches_brute_force_pairs():
    """The emulator collides the filled list as a brute-force pair search predicts.

    The first pass fibres a maximum independent set in every collision group (groups of
    up to ``exact_group_max`` targets are solved exactly), so its collided fraction must
    equal 1 − Σ MIS / N computed from brute-force pairs, and it rises with the fill.
    """
    shell = SurveyShell(z_min=0.01, z_max=0.03, m_lim=16.5)
    fp = cap_footprint(64, 30.0, 20.0, 30.0)
    box = lf_box(4, 200.0, clustered=True)
    o = [100.0] * 3
    # a wide angle on a few thousand targets gives groups of up to 8 (enumerable), where the
    # fill doubles the collided fraction (4.6 % → 9.5 % with these seeds)
    angle = 300.0
    fractions = {}
    for source in ("box", "fill"):
        _, info = build_cone(box, model(source, shell, fibres=True, footprint=fp, angle=angle),
                             o, None, cone_rngs(6, 0), keep_targets=True)
        t = info["targets"]
        ra, dec = np.asarray(t["ra"]), np.asarray(t["dec"])
        expected = 1.0 - brute_force_first_pass(ra, dec, angle) / len(ra)
        got = info["fibres"]["collided_fraction"]
        assert got == pytest.approx(expected, abs=0.5 / len(ra)), source
        assert max(int(k) for k in info["fibres"]["groups_by_size"]) >= 3  # not only pairs
        fractions[source] = got
    assert fractions["fill"] > 1.5 * fractions["box"] > 0


def test_a_fill_needs_a_flux_limit_and_names_the_key():
    d = tiny_dict(**{"survey.targets.source": "fill"})
    d["survey"]["shell"].pop("m_lim", None)
    with pytest.raises(InputError, match="survey.targets.source"):
        config_from_dict(d)
    with pytest.raises(InputError, match="source"):
        TargetSettings(source="everything")


def test_box_cells_and_fill_inputs_are_prepared_once_per_box(monkeypatch):
    """A process builds many cones from one box: the cells and the fill's sorted magnitudes
    and neighbour distances are kept with the box object, and a cone built through the kept
    inputs equals one built from a fresh copy of the box (they are a fixed function of it)."""
    import conecheck.cone.build as build_module

    calls = []
    real = build_module.box_fill_inputs
    monkeypatch.setattr(build_module, "box_fill_inputs",
                        lambda *a, **k: calls.append(1) or real(*a, **k))
    shell = SurveyShell(z_min=0.01, z_max=0.03, m_lim=16.5)
    box = lf_box(4, 200.0)
    survey = model("fill", shell, angle=60.0)
    o = [100.0] * 3
    first, info = build_cone(box, survey, o, None, cone_rngs(7, 0),
                             cells=build_module.prepare_box(box))
    again, _ = build_cone(box, survey, o, None, cone_rngs(7, 0),
                          cells=build_module.prepare_box(box))
    assert info["n_fill_targets"] > 0 and len(calls) == 1
    assert build_module.prepare_box(box) is build_module.prepare_box(box)
    fresh = GalaxyBox(box.position.copy(), box.velocity.copy(), box.box_size, box.redshift,
                      abs_mag=box.abs_mag.copy())
    other, _ = build_cone(fresh, survey, o, None, cone_rngs(7, 0))
    assert len(calls) == 2
    for c in first.colnames:
        np.testing.assert_array_equal(first[c], again[c])
        np.testing.assert_array_equal(first[c], other[c])
