"""Matter particles carried into a light cone, for lensing statistics.

The particles go through the same observer, rotation and periodic replicas as the galaxies
(:func:`~.build.build_cone`), in real space (lensing sees mass where it is), and with no
selection but proximity: a particle is kept when some galaxy of the survey could have it
within the statistic's reach, i.e. when it lies within ``r_perp`` across and ``r_los`` along
the line of sight of a point of the shell inside the footprint. That is, its distance χ
lies within √(r_perp² + r_los²) of the shell and its direction within arcsin(r_perp/χ) of
the footprint (with the coarse coverage's pixel size as slack), so every galaxy's
surroundings are complete while the rest of the sky is left out.
"""

from __future__ import annotations

import math
from typing import Any

import healpy as hp
import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..catalog import MatterParticles
from .build import SurveyModel
from .geometry import (
    BoxCells,
    as_rotation_matrix,
    check_observer,
    iter_shell_chunks,
    replica_offsets,
)

#: N_side of the map of angular distances to the footprint (pixels of ≈ 0.9°; the test
#: subtracts a pixel's radius, so it keeps every particle it should).
_NSIDE = 64


def carry_matter(matter: MatterParticles, survey: SurveyModel, observer: ArrayLike,
                 rotation: Any, r_perp: float, r_los: float,
                 cells: BoxCells | None = None) -> NDArray[np.float64]:
    """Sky-frame positions [Mpc/h] (observer at the origin) of the particles a cone needs.

    Parameters
    ----------
    matter : MatterParticles
        The box's particles.
    survey : SurveyModel
        Shell, footprint and cosmology of the cone.
    observer : array_like (3,)
        Observer in box coordinates [Mpc/h] (as for the galaxies).
    rotation : (3, 3) array, scipy Rotation or None
        Box frame → sky frame (as for the galaxies).
    r_perp, r_los : float
        Reach of the statistic across and along a galaxy's line of sight [Mpc/h].
    cells : BoxCells, optional
        The particles sorted into cells (built here when omitted).

    Returns
    -------
    ndarray, shape (N, 3)
    """
    L = float(matter.box_size)
    o = check_observer(observer, L)
    rot = as_rotation_matrix(rotation)
    cosmo, shell = survey.cosmology, survey.shell
    reach = math.hypot(r_perp, r_los)
    r_in = max(float(cosmo.comoving_distance(shell.z_min)) - reach, 0.0)
    r_out = float(cosmo.comoving_distance(shell.z_max)) + reach
    if cells is None:
        cells = BoxCells.build(matter.position, L)
    coverage = survey.coverage()
    # angular distance from each pixel of a coarse map to the footprint's coverage, once
    # per cone: then each particle costs one pixel lookup
    far = None
    if coverage is not None:
        x, y, z = hp.pix2vec(_NSIDE, np.arange(hp.nside2npix(_NSIDE)))
        chord, _ = coverage.tree.query(np.column_stack([x, y, z]), k=1)
        far = (2.0 * np.arcsin(np.minimum(0.5 * chord, 1.0)) - coverage.pixel_radius
               - hp.max_pixrad(_NSIDE))
    kept = []
    # no coverage pruning of whole cells here: a particle outside the footprint still
    # matters to the galaxies near its edge
    for chunk in iter_shell_chunks(matter.position, cells, L, o, rot,
                                   replica_offsets(o, L, r_in, r_out), r_in, r_out, None):
        r = chunk.r
        if far is not None and len(r):
            chi = np.linalg.norm(r, axis=1)
            # within r_perp of the observer any direction may be near a galaxy
            angle = np.where(chi > r_perp,
                             np.arcsin(np.clip(r_perp / np.maximum(chi, 1e-300), 0.0, 1.0)),
                             np.pi)
            r = r[far[hp.vec2pix(_NSIDE, r[:, 0], r[:, 1], r[:, 2])] <= angle]
        kept.append(r)
    return np.concatenate(kept) if kept else np.zeros((0, 3))
