"""Derivatives of every box statistic with respect to the HOD parameters of each sample.

One task per sample and parameter (so that a cluster's workers share the stage evenly: one
task per sample left a worker idle while the larger sample ran): the run's halos are
populated again with the parameter moved by ± its step (:mod:`conecheck.box.sensitivity`),
each galaxy's draws keyed by its identity (:class:`conecheck.box.populate.KeyedDraws`), so
that the two boxes share every galaxy both models occupy (common random numbers), and every
configured statistic is measured on the box as the box task measures it.
:func:`merge_derivatives` joins a sample's tasks; the central differences feed the
parameter-shift forecast of the comparison (:mod:`conecheck.compare.fisher`).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..box import populate_models
from ..box.halos import HaloCatalog
from ..box.populate import KeyedDraws
from ..box.sensitivity import (
    DECORATION_PARAMETERS,
    parameter_values,
    sample_threshold,
    step_values,
    varied_model,
)
from ..errors import InputError
from ..streams import stream_key
from .specs import DerivativesSpec
from .tasks import measure_box_pair


def _has_column(halos: Any, name: str) -> bool:
    try:
        halos.column(name)
    except InputError:
        return False
    return True


def hod_derivatives_task(spec: DerivativesSpec, halos: HaloCatalog) -> dict[str, Any]:
    """∂(statistic)/∂(parameter) for one sample, by central differences on the box.

    ``halos`` are the run's halos (their digest is ``spec.halos_content``), populated again
    with ``spec.hod`` moved by ± the step of each parameter (of ``spec.parameters`` only,
    when given).

    Returns
    -------
    dict
        ``parameters`` (names), ``values`` (fiducial), ``steps`` (the actual half-separation
        of each difference), ``derivatives`` (statistic → array (k, p): one row per bin, one
        column per parameter, units of the statistic per unit of the parameter), ``notes``.
        Empty ``parameters`` with a note when the sample is not one of the HOD's thresholds.
    """
    box_spec = spec.box
    sample = box_spec.sample
    model = spec.hod
    threshold = sample_threshold(model, sample.mag_max)
    notes: list[str] = []
    if threshold is None:
        return {"parameters": [], "values": [], "steps": [], "derivatives": {},
                "notes": [f"sample '{sample.name}' (mag_max = {sample.mag_max}) is not a "
                          f"threshold of the HOD; no parameter derivatives"]}
    names = list(parameter_values(model, threshold, with_decoration=True))
    if not _has_column(halos, model.assembly_bias.secondary):
        names = [n for n in names if n not in DECORATION_PARAMETERS]
        notes.append(f"the halos carry no '{model.assembly_bias.secondary}' column: the "
                     f"decoration strengths are left out")
    if spec.parameters is not None:
        names = [n for n in names if n in spec.parameters]
    cosmo = box_spec.model()
    step_of = dict(spec.steps)
    fid = parameter_values(model, threshold, with_decoration=True)
    per_stat: dict[str, list[np.ndarray]] = {s: [] for s in box_spec.statistics.measure}
    steps = []
    for name in names:
        lo, hi = step_values(model, threshold, name, step_of[name])
        # every galaxy's draws keyed by its identity (common random numbers): the two
        # boxes share every galaxy both models occupy, and their pairs are counted once
        draws = KeyedDraws(stream_key(box_spec.seed, "hod-derivative", sample.name))
        # one-threshold boxes measured whole: no magnitudes needed
        boxes = populate_models(halos, [varied_model(model, threshold, name, v)
                                        for v in (lo, hi)], draws, cosmo, magnitudes=False)
        for box in boxes:
            box.matter = halos.matter
        values = dict(zip(("lo", "hi"), measure_box_pair(box_spec, *boxes), strict=True))
        for stat in per_stat:
            per_stat[stat].append((np.asarray(values["hi"][stat].value, dtype=np.float64)
                                   - np.asarray(values["lo"][stat].value, dtype=np.float64))
                                  / (hi - lo))
        steps.append(0.5 * (hi - lo))
    return {"parameters": names, "values": [fid[n] for n in names], "steps": steps,
            "derivatives": {s: np.column_stack(v) for s, v in per_stat.items() if v},
            "notes": notes}


def merge_derivatives(parts: list[dict[str, Any]]) -> dict[str, Any]:
    """One sample's derivatives from its tasks over disjoint parameter sets, in their order
    (the result of a single task over all of them); notes once each."""
    with_params = [p for p in parts if p["parameters"]]
    stats = list(with_params[0]["derivatives"]) if with_params else []
    return {"parameters": [n for p in with_params for n in p["parameters"]],
            "values": [v for p in with_params for v in p["values"]],
            "steps": [v for p in with_params for v in p["steps"]],
            "derivatives": {s: np.concatenate([np.asarray(p["derivatives"][s])
                                               for p in with_params], axis=1)
                            for s in stats},
            "notes": list(dict.fromkeys(n for p in parts for n in p["notes"]))}


__all__ = ["hod_derivatives_task", "merge_derivatives"]
