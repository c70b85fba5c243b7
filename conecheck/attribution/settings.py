"""Settings of the attribution stages: [ladder], [corrections] and [cut_sweep].

Each is optional: a section present in the file is switched on unless it says
``enabled = false``; ``conecheck run --ladder`` switches all three on. The run
configuration (:mod:`conecheck.config`) holds them; the stages in this package read them.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Literal

from ..cone.corrections import correction_problem
from ..cone.settings import SampleCut, SurveyShell
from ..errors import InputError
from ..loader import build_section

#: Steps an effect ladder can add, one at a time, after its geometry-only rung.
LADDER_STEPS = ("rsd", "redshift_errors", "physical_fluxes", "footprint", "flux_limit",
                "fibres", "target_fill", "fibre_budget", "correction")
#: The documented default order (the flux limit stays as configured on every rung).
DEFAULT_LADDER_ORDER = ("rsd", "redshift_errors", "physical_fluxes", "footprint", "fibres",
                        "target_fill", "fibre_budget", "correction")


@dataclass(frozen=True)
class LadderConfig:
    """The effect ladder: the same cones with the survey's effects added one at a time.

    Attributes
    ----------
    enabled : bool
        Run the ladder.
    order : list of str
        Steps added cumulatively after the geometry-only rung, among rsd,
        redshift_errors, physical_fluxes (fluxes from the true distance and velocity, cuts
        on the inferred magnitude), footprint, flux_limit, fibres (collisions, uncorrected when a
        ``correction`` step follows), target_fill (the faint targets of
        ``survey.targets.source = "fill"``), fibre_budget (the tiles' fibre limit) and
        correction (the configured one). Effects not
        listed stay as configured on every rung; steps the survey switches off are skipped.
        Rungs before ``footprint`` see the sky chosen by ``sky``.
    cuts : {"primary", "all"}
        Which redshift cuts of each sample the ladder measures.
    sky : {"cap", "full_sky"}
        Sky of the rungs before the footprint step: ``cap``, a round cap with the
        footprint's effective area centred on it (completeness 1: the survey's solid angle
        without its edges, holes and completeness; as cheap as survey cones); ``full_sky``,
        the whole sky (1/f_sky times larger cones).
    """

    enabled: bool = False
    order: tuple[str, ...] = DEFAULT_LADDER_ORDER
    cuts: Literal["primary", "all"] = "primary"
    sky: Literal["cap", "full_sky"] = "cap"

    def __post_init__(self) -> None:
        problems = [f"order = {list(self.order)!r}: item {i} {s!r} is not a step; expected "
                    f"one of {', '.join(LADDER_STEPS)}"
                    for i, s in enumerate(self.order) if s not in LADDER_STEPS]
        dup = sorted({s for s in self.order if self.order.count(s) > 1})
        if dup:
            problems.append(f"order = {list(self.order)!r}: steps must not repeat ({dup})")
        if not self.order:
            problems.append("order = []: expected at least one step")
        if ("correction" in self.order and "fibres" in self.order
                and self.order.index("correction") < self.order.index("fibres")):
            problems.append(f"order = {list(self.order)!r}: 'correction' corrects fibre "
                            f"collisions, so it must come after 'fibres'")
        if self.cuts not in ("primary", "all"):
            problems.append(f"cuts = {self.cuts!r}: expected 'primary' or 'all'")
        if self.sky not in ("cap", "full_sky"):
            problems.append(f"sky = {self.sky!r}: expected 'cap' or 'full_sky'")
        if problems:
            raise InputError("; ".join(problems), problems)


@dataclass(frozen=True)
class CorrectionsConfig:
    """Several fibre-collision corrections compared on the same collided cones.

    Attributes
    ----------
    enabled : bool
        Run the comparison.
    names : list of str
        Corrections to compare (keys of ``conecheck.cone.CORRECTIONS``); empty: all of them.
    cuts : {"primary", "all"}
        Which redshift cuts of each sample are compared.
    """

    enabled: bool = False
    names: tuple[str, ...] = ()
    cuts: Literal["primary", "all"] = "primary"

    def __post_init__(self) -> None:
        problems = [p for i, n in enumerate(self.names)
                    if (p := correction_problem(n, f"names[{i}]"))]
        dup = sorted({n for n in self.names if self.names.count(n) > 1})
        if dup:
            problems.append(f"names = {list(self.names)!r}: names must not repeat ({dup})")
        if self.cuts not in ("primary", "all"):
            problems.append(f"cuts = {self.cuts!r}: expected 'primary' or 'all'")
        if problems:
            raise InputError("; ".join(problems), problems)


def _check_grid(z_max: tuple[float, ...], key: str) -> list[str]:
    problems = [f"{key} = {list(z_max)!r}: item {i} ({z!r}) is not a redshift > 0"
                for i, z in enumerate(z_max) if not z > 0]
    if len(set(z_max)) != len(z_max):
        problems.append(f"{key} = {list(z_max)!r}: values must not repeat")
    return problems


@dataclass(frozen=True)
class SweepCuts:
    """One sample's cuts in the redshift-cut sweep (``[cut_sweep.samples.NAME]``).

    Attributes
    ----------
    z_max : list of float
        Upper redshift limits, each with the sample's primary z_min.
    cuts : list of tables
        Further cuts, each with ``label``, ``z_min``, ``z_max``.
    """

    z_max: tuple[float, ...] = ()
    cuts: tuple[SampleCut, ...] = ()

    def __post_init__(self) -> None:
        problems = _check_grid(self.z_max, "z_max")
        for i, c in enumerate(self.cuts):
            if c.z_min is None or c.z_max is None:
                problems.append(f"cuts[{i}]: expected both z_min and z_max")
        if problems:
            raise InputError("; ".join(problems), problems)


@dataclass(frozen=True)
class CutSweepConfig:
    """Alternative redshift cuts validated on the same cones, to find the widest safe one.

    Attributes
    ----------
    enabled : bool
        Run the sweep.
    z_max : list of float
        Upper limits tried for every sample without its own entry (primary z_min kept).
    n_grid : int
        When neither is given: this many z_max values, evenly spaced from the middle of
        each sample's primary cut to the shell's z_max.
    samples : table of tables
        Per-sample cuts (``[cut_sweep.samples.NAME]`` with ``z_max`` and/or ``cuts``).
    """

    enabled: bool = False
    z_max: tuple[float, ...] = ()
    n_grid: int = 4
    samples: dict[str, SweepCuts] = field(default_factory=dict)

    def __post_init__(self) -> None:
        problems = _check_grid(self.z_max, "z_max")
        if not 1 <= self.n_grid <= 50:
            problems.append(f"n_grid = {self.n_grid!r}: expected 1 to 50 cuts")
        if problems:
            raise InputError("; ".join(problems), problems)


def switched_on(table: Any) -> Any:
    """A present section is on unless it says otherwise."""
    return {"enabled": True, **table} if isinstance(table, Mapping) else table


def cut_sweep_section(table: Any, problems: list[str]) -> CutSweepConfig | None:
    """The [cut_sweep] section, its per-sample tables and cuts (problems collected)."""
    if table is None:
        return CutSweepConfig()
    if not isinstance(table, Mapping):
        problems.append(f"cut_sweep: expected a table, got {table!r}")
        return None
    raw = table.get("samples", {})
    if not isinstance(raw, Mapping):
        problems.append("cut_sweep.samples: expected a table of sample names")
        raw = {}
    samples: dict[str, SweepCuts] = {}
    for name, sub in raw.items():
        path = f"cut_sweep.samples.{name}"
        if not isinstance(sub, Mapping):
            problems.append(f"{path}: expected a table (z_max, cuts)")
            continue
        cuts = []
        raw_cuts = sub.get("cuts", [])
        if not isinstance(raw_cuts, list):
            problems.append(f"{path}.cuts: expected a list of tables (label, z_min, z_max)")
            raw_cuts = []
        for j, c in enumerate(raw_cuts):
            if isinstance(c, Mapping) and "mag_max" in c:
                problems.append(f"{path}.cuts[{j}].mag_max: a swept cut keeps its sample's "
                                f"magnitude threshold")
                continue
            cut = build_section(SampleCut, c, f"{path}.cuts[{j}]", problems)
            if cut is not None:
                cuts.append(cut)
        s = build_section(SweepCuts, sub, path, problems, skip=("cuts",),
                          extra={"cuts": tuple(cuts)})
        if s is not None:
            samples[str(name)] = s
    return build_section(CutSweepConfig, switched_on(table), "cut_sweep", problems,
                         skip=("samples",), extra={"samples": samples})


def sweep_problems(sweep: CutSweepConfig, samples: Sequence[Any], shell: SurveyShell
                   ) -> list[str]:
    """Cross-section checks of [cut_sweep] against the run's ``samples`` (their names,
    primary z_min and cuts) and the survey ``shell``: known samples, cuts inside the shell,
    labels that do not repeat a sample's own cuts."""
    problems: list[str] = []
    by_name = {s.name: s for s in samples}
    for name in sweep.samples:
        if name not in by_name:
            problems.append(f"cut_sweep.samples.{name}: no sample of that name (samples: "
                            f"{', '.join(by_name)})")
    for s in samples:
        own = sweep.samples.get(s.name)
        grid = own.z_max if own is not None else sweep.z_max
        key = (f"cut_sweep.samples.{s.name}.z_max" if own is not None
               else "cut_sweep.z_max")
        for i, z in enumerate(grid):
            if not s.z_min < z <= shell.z_max + 1e-12:
                problems.append(f"{key}[{i}] = {z!r}: expected z_min of sample '{s.name}' "
                                f"({s.z_min}) < z_max <= survey.shell.z_max ({shell.z_max})")
        labels = {c.label for c in s.cuts}
        for j, c in enumerate(own.cuts if own is not None else ()):
            where = f"cut_sweep.samples.{s.name}.cuts[{j}]"
            if c.z_min < shell.z_min - 1e-12 or c.z_max > shell.z_max + 1e-12:
                problems.append(f"{where}: cut {c.z_min}–{c.z_max} lies outside the survey "
                                f"shell {shell.z_min}–{shell.z_max}")
            if c.label in labels:
                problems.append(f"{where}.label = {c.label!r}: sample '{s.name}' already has "
                                f"a cut of that name")
            labels.add(c.label)
    return problems


__all__ = ["DEFAULT_LADDER_ORDER", "LADDER_STEPS", "CorrectionsConfig", "CutSweepConfig",
           "LadderConfig", "SweepCuts", "cut_sweep_section", "sweep_problems", "switched_on"]
