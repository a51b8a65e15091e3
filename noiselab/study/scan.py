"""The scan job: a potential-energy curve under noise, one geometry coordinate varied.

Axis: ``bond I J`` (atom J and everything bonded on its side of the I-J bond move along the
I-J axis; the value is the I-J distance in Angstrom; bonds by covalent radii, PySCF's table,
distance < 1.25 (r_I + r_J)) or ``scale`` (every coordinate scaled about the centroid; the value
is the factor). Per point: exact (FCI/CASCI), Hartree-Fock, the noiseless ansatz, and every
recipe at the budget (``run_recipe``, the one target rule).

How points run:

1. In the calling process, along the axis: PySCF and the noiseless optimization of each point,
   the first start warm-started from the nearest already optimized point's parameters (recorded
   as ``warm_start_from``); cached under the point's study and that start.
2. The points not in the results cache are independent tasks on the study executor (in-process,
   process pool or Dask): each builds its own context (PySCF, compile, plan) with the optimum of
   step 1 and runs the recipes through a caching runner. A point is handed over as soon as its
   optimum is known, so the next optimizations overlap the running points, and the workers are
   started (spawned workers import the stack: seconds) before the first optimization when
   there is no cache, else at the first missing point (a resumed scan may need none). A
   finished point is stored whole, so a resumed scan computes only the missing ones.
3. Refinement (``refine`` rounds, default 2): two more points at x* +- h/4**(r+1) around the
   exact curve's fitted minimum x* (h: the grid spacing), so the derived numbers rest on points
   near the minimum.

Active space: the study's (same electron and orbital count at every point); the active orbitals
are the canonical (RO)HF orbitals right above the frozen core at each geometry (energy order).

Derived numbers (per curve: exact, Hartree-Fock, ansatz, each recipe): a not-a-knot cubic spline
(scipy ``CubicSpline``) through every point, minimized (``minimize_scalar``, bounded) between
the lowest point's neighbours: equilibrium coordinate and curvature (spline's second derivative
there, Ha per unit^2). Not given when the lowest point is the scan's first or last. Error bars:
linear propagation of each point's standard error through the fit (finite differences). The
first-minus-last energy difference E(first) - E(last) with sqrt(s_first^2 + s_last^2).

Over 400 lines: the axis (geometry moves), the warm-started point tasks, the resumable point
cache and the curve fits of one job; the records and their JSON stay beside the fits that
fill them.
"""

from __future__ import annotations

import dataclasses
import itertools
import json
import math
import os
import time
from collections.abc import Callable, Iterator, Sequence
from pathlib import Path
from typing import Any

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, ValidationError
from pyscf.data import elements, radii
from scipy.interpolate import CubicSpline
from scipy.optimize import minimize_scalar

from noiselab.chem.encode import encode
from noiselab.chem.molecule import MoleculeSpec, compute_problem, molecule_from_mapping
from noiselab.chem.optimize import OptimizationResult, optimize_noiseless
from noiselab.chem.stability import hf_stability
from noiselab.common.atomic import write_text_atomic
from noiselab.common.counts import Count, parse_count
from noiselab.common.errors import arg, from_validation_error, input_error
from noiselab.common.wording import CAUTION
from noiselab.emulate.memory import MEMORY_LIMIT_ENV
from noiselab.mitigate.target import reaches_target
from noiselab.study.assess import check_recipes, run_recipes
from noiselab.study.cache import (
    CachingRunner,
    ResultsCache,
    digest,
    pack_record,
    source_digest,
    unpack_record,
)
from noiselab.study.context import _optimum_key, ansatz_circuit, build_context, recipes_verify
from noiselab.study.executor import make_executor
from noiselab.study.job import start_job
from noiselab.study.results import RunStats, csv_text, jsonable
from noiselab.study.spec import Study
from noiselab.study.sweep import chosen_recipes

POINT_KIND = "scan-point-v1"
OPTIMUM_KIND = "scan-optimum-v1"
AXIS_KINDS = ("bond", "scale")
MAX_POINTS = 200
MAX_REFINE = 4
BOND_FACTOR = 1.25

ProgressHook = Callable[[str, int, int], None]
Atom = tuple[str, float, float, float]


# ---------------------------------------------------------------- the axis


class ScanSection(BaseModel):
    """The study file's optional ``scan:`` section (command-line options override it)."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    bond: tuple[int, int] | None = None
    scale: bool = False
    start: float | None = Field(default=None, allow_inf_nan=False, gt=0)
    stop: float | None = Field(default=None, allow_inf_nan=False, gt=0)
    points: Count = Field(default=9, ge=2, le=MAX_POINTS)
    refine: Count = Field(default=2, ge=0, le=MAX_REFINE)
    recipes: list[str] | None = None


@dataclasses.dataclass(frozen=True)
class ScanAxis:
    """What varies: ``kind`` "bond" (``atoms`` = (I, J), values in Angstrom) or "scale"."""

    kind: str
    atoms: tuple[int, int] | None
    start: float
    stop: float
    points: int
    refine: int = 2

    @property
    def unit(self) -> str:
        return "Angstrom" if self.kind == "bond" else "factor"

    def grid(self) -> tuple[float, ...]:
        return tuple(float(v) for v in np.linspace(self.start, self.stop, self.points))


def _covalent_angstrom(symbol: str) -> float:
    z = elements.charge(symbol)
    return float(radii.COVALENT[z] * radii.BOHR)


def moving_atoms(atoms: Sequence[Atom], i: int, j: int) -> tuple[int, ...]:
    """Atoms that move with J when the I-J bond stretches: J's side of the bond graph without
    the I-J edge. Refused when I is reached too (a ring)."""
    n = len(atoms)
    xyz = np.array([a[1:] for a in atoms], dtype=float)
    r = [_covalent_angstrom(a[0]) for a in atoms]
    side, todo = {j}, [j]
    while todo:
        a = todo.pop()
        for b in range(n):
            if b in side or {a, b} == {i, j}:
                continue
            if np.linalg.norm(xyz[a] - xyz[b]) < BOND_FACTOR * (r[a] + r[b]):
                side.add(b)
                todo.append(b)
    if i in side:
        raise input_error(
            "scan",
            arg("bond"),
            f"atoms {i} and {j} are in a ring",
            "a bond whose cut splits the molecule",
        )
    return tuple(sorted(side))


def geometry_at(atoms: Sequence[Atom], axis: ScanAxis, value: float) -> tuple[Atom, ...]:
    """The molecule's atoms with the axis coordinate set to ``value``."""
    xyz = np.array([a[1:] for a in atoms], dtype=float)
    if axis.kind == "scale":
        c = xyz.mean(axis=0)
        new = c + (xyz - c) * value
    else:
        assert axis.atoms is not None
        i, j = axis.atoms
        d = xyz[j] - xyz[i]
        u = d / np.linalg.norm(d)
        shift = (value - float(np.linalg.norm(d))) * u
        new = xyz.copy()
        for k in moving_atoms(atoms, i, j):
            new[k] = xyz[k] + shift
    return tuple((a[0], *(float(c) for c in p)) for a, p in zip(atoms, new, strict=True))  # type: ignore[misc]


def scan_axis(
    study: Study,
    bond: Sequence[int] | None,
    scale: bool | None,
    start: float | None,
    stop: float | None,
    points: int | None,
    refine: int | None,
) -> ScanAxis:
    """The axis from the options, else the study's ``scan:`` section; one-line refusals."""
    src = str(study.source)
    if not isinstance(study.molecule, MoleculeSpec):
        raise input_error(
            src,
            "molecule",
            "a scan moves atoms; this study's problem comes from a file",
            "a study with molecule: geometry",
        )
    raw = study.raw.get("scan") if isinstance(study.raw, dict) else None
    try:
        section = ScanSection.model_validate(raw or {})
    except ValidationError as exc:
        raise from_validation_error(exc, src, prefix="scan", model=ScanSection) from None
    if bond is not None and scale:
        bond_or_scale = f"{arg('bond')} or {arg('scale')}"
        raise input_error("scan", bond_or_scale, "both given", f"one of {bond_or_scale}")
    if bond is None and not scale:
        bond = section.bond
        scale = section.scale if bond is None else False
    if bond is None and not scale:
        raise input_error(
            src,
            "scan",
            "no coordinate to vary",
            f"{arg('bond')}, {arg('scale')}, or a scan: section",
        )
    n_atoms = len(study.molecule.geometry)
    if bond is not None:
        pair = tuple(int(b) for b in bond)
        if len(pair) != 2 or pair[0] == pair[1] or not all(0 <= b < n_atoms for b in pair):
            raise input_error(
                src, arg("bond"), f"{list(bond)}", f"two different atom indices 0..{n_atoms - 1}"
            )
    kind = "scale" if scale else "bond"
    atoms = study.molecule.geometry
    if kind == "bond":
        here = float(np.linalg.norm(np.subtract(atoms[pair[1]][1:], atoms[pair[0]][1:])))
        lo_d, hi_d = 0.75 * here, 2.5 * here
    else:
        lo_d, hi_d = 0.75, 2.5
    start = section.start if start is None else start
    stop = section.stop if stop is None else stop
    start, stop = (lo_d if start is None else float(start)), (hi_d if stop is None else float(stop))
    points = section.points if points is None else parse_count(points, arg("points"), 2, MAX_POINTS)
    refine = section.refine if refine is None else parse_count(refine, arg("refine"), 0, MAX_REFINE)
    for key, v in ((arg("start"), start), (arg("stop"), stop)):
        if not math.isfinite(v) or v <= 0:
            raise input_error(
                "scan",
                key,
                f"{v}",
                f"a positive {('distance in Angstrom' if kind == 'bond' else 'factor')}",
            )
    if stop <= start:
        raise input_error(
            "scan",
            arg("stop"),
            f"{stop} <= {arg('start')} {start}",
            f"a value above {arg('start')}",
        )
    if not 2 <= points <= MAX_POINTS:
        raise input_error("scan", arg("points"), f"{points}", f"2 to {MAX_POINTS}")
    if not 0 <= refine <= MAX_REFINE:
        raise input_error("scan", arg("refine"), f"{refine}", f"0 to {MAX_REFINE}")
    return ScanAxis(kind, pair if kind == "bond" else None, start, stop, points, refine)


def study_at(study: Study, axis: ScanAxis, value: float) -> Study:
    """``study`` with the molecule moved to ``value`` on the axis (validated again)."""
    data = study.molecule.model_dump(mode="json")
    data["geometry"] = [list(a) for a in geometry_at(study.molecule.geometry, axis, value)]
    molecule = molecule_from_mapping(
        data, f"{study.source} (scan at {value:g} {axis.unit})", "molecule"
    )
    return dataclasses.replace(study, molecule=molecule, layout=None)


# ---------------------------------------------------------------- points


@dataclasses.dataclass(frozen=True)
class ScanEntry:
    """One recipe at one point (energy in Ha; bias, std in mHa; P and the one rule)."""

    recipe: str
    energy_ha: float
    bias_mha: float
    std_mha: float
    p_within_target: float
    reaches_target: bool
    shots_needed: int | None
    limited_by: str


@dataclasses.dataclass(frozen=True)
class ScanPoint:
    """Everything computed at one geometry."""

    coordinate: float
    geometry: tuple[tuple[Any, ...], ...]  # (symbol, x, y, z) in Angstrom
    exact_energy_ha: float
    hf_energy_ha: float
    ansatz_energy_ha: float
    ansatz_error_mha: float
    warm_start_from: float | None  # coordinate whose optimum started the optimizer
    optimizer_starts: int
    two_qubit_gates: int
    entries: tuple[ScanEntry, ...]
    hf_stable: bool  # PySCF's stability analysis of the (RO)HF solution (chem.stability)
    hf_instability: str  # what is unstable, in words ("" when stable)

    def recipe(self, name: str) -> ScanEntry:
        return next(e for e in self.entries if e.recipe == name)


def point_from_record(rec: dict[str, Any]) -> ScanPoint:
    """Inverse of ``dataclasses.asdict`` for a ScanPoint (JSON lists back to tuples)."""
    return ScanPoint(
        **{
            **rec,
            "geometry": tuple(tuple(a) for a in rec["geometry"]),
            "entries": tuple(ScanEntry(**e) for e in rec["entries"]),
        }
    )


@dataclasses.dataclass(frozen=True)
class PointTask:
    """One point for the executor (picklable)."""

    coordinate: float
    study: Study
    recipes: tuple[tuple[str, tuple[dict[str, Any], ...]], ...]
    cache: Any  # ResultsCache (reopened in a worker)
    optimum: OptimizationResult
    warm_start_from: float | None


@dataclasses.dataclass(frozen=True)
class PointOutcome:
    point: ScanPoint
    simulations: int
    cache_hits: int
    engine_seconds: float


def run_point(task: PointTask) -> PointOutcome:
    """Build the point's own context (with the given optimum) and run every recipe."""
    recipes = dict(task.recipes)
    ctx = build_context(
        task.study, cache=task.cache, optimum=task.optimum,
        verification=recipes_verify(recipes.values()),
    )  # fmt: skip
    check_recipes(ctx, recipes)
    runner = CachingRunner(ctx.experiment, task.cache)
    results = run_recipes(ctx, recipes, runner)
    stab = hf_stability(task.study.molecule)
    conf = float(task.study.confidence)
    entries = tuple(
        ScanEntry(
            recipe=name,
            energy_ha=float(r.energy_ha),
            bias_mha=float(r.bias_exact_mha),
            std_mha=float(r.std_mha),
            p_within_target=float(r.p_within_target),
            reaches_target=reaches_target(r.p_within_target, conf),
            shots_needed=None if r.shots_needed is None else int(r.shots_needed),
            limited_by=str(r.limited_by),
        )
        for name, r in results.items()
    )
    point = ScanPoint(
        coordinate=float(task.coordinate),
        geometry=tuple(tuple(a) for a in task.study.molecule.geometry),
        exact_energy_ha=float(ctx.exact_energy_ha),
        hf_energy_ha=float(ctx.qubit_problem.hf_energy_ha),
        ansatz_energy_ha=float(ctx.ansatz_energy_ha),
        ansatz_error_mha=float(ctx.ansatz_energy_ha - ctx.exact_energy_ha) * 1000.0,
        warm_start_from=task.warm_start_from,
        optimizer_starts=int(task.optimum.starts),
        two_qubit_gates=int(ctx.compiled.two_qubit_count),
        entries=entries,
        hf_stable=stab.stable,
        hf_instability=stab.words(),
    )
    return PointOutcome(point, runner.simulations, runner.cache_hits, runner.engine_seconds)


def _warm_optimum(
    study: Study, initial: np.ndarray | None, cache: ResultsCache
) -> OptimizationResult:
    """The point's noiseless optimum, first start at ``initial`` (cached per study and start)."""
    qp = encode(compute_problem(study.molecule), study.encoding, study.drop_fixed_parity_qubits)
    circuit = ansatz_circuit(study, qp)
    start = None if initial is None else [float(v) for v in initial]
    key = digest(OPTIMUM_KIND, _optimum_key(study), start)
    hit = cache.get(OPTIMUM_KIND, key) if cache.enabled else None
    if hit is not None:
        try:
            return unpack_record(OptimizationResult, hit[0])
        except (ValueError, TypeError, KeyError, json.JSONDecodeError):
            pass
    a = study.ansatz
    result = optimize_noiseless(
        qp, circuit, starts=a.starts, seed=a.start_seed, max_iterations=a.max_iterations,
        max_starts=a.max_starts, initial=None if initial is None else np.asarray(initial),
    )  # fmt: skip
    if cache.enabled:
        cache.put(OPTIMUM_KIND, key, pack_record(result), result.seconds)
    return result


def _point_key(study: Study, recipes: Any, optimum: OptimizationResult) -> str:
    s = study
    return digest(
        POINT_KIND, source_digest(), _optimum_key(s), s.profile.fingerprint,
        [s.optimization_level, s.compile_seeds, s.shots, s.target_mha, s.confidence, s.seed],
        s.emulation.model_dump(mode="json"), [s.amplification_spread, s.amplification_offset],
        jsonable(recipes), [float(v) for v in optimum.parameters],
        os.environ.get(MEMORY_LIMIT_ENV),
    )  # fmt: skip


# ---------------------------------------------------------------- derived numbers


@dataclasses.dataclass(frozen=True)
class CurveFit:
    """Equilibrium coordinate and curvature of one curve, and E(first) - E(last)."""

    curve: str
    equilibrium: float | None  # axis unit
    equilibrium_std: float | None
    curvature_ha: float | None  # Ha per axis unit squared
    curvature_std_ha: float | None
    equilibrium_error: float | None  # minus the exact curve's
    difference_mha: float  # E(first) - E(last)
    difference_std_mha: float
    difference_error_mha: float  # minus the exact curve's


def spline_minimum(xs: Sequence[float], es: Sequence[float]) -> tuple[float, float] | None:
    """(x at the minimum, second derivative there) of the not-a-knot cubic spline through the
    points, between the lowest point's neighbours; None when the lowest point is at an end or
    there are fewer than 4 points."""
    x, e = np.asarray(xs, dtype=float), np.asarray(es, dtype=float)
    k = int(np.argmin(e))
    if len(x) < 4 or k in (0, len(x) - 1):
        return None
    cs = CubicSpline(x, e)
    r = minimize_scalar(cs, bounds=(x[k - 1], x[k + 1]), method="bounded", options={"xatol": 1e-10})
    return float(r.x), float(cs(r.x, 2))


def fit_curve(
    name: str,
    xs: Sequence[float],
    es: Sequence[float],
    stds_ha: Sequence[float],
    exact: tuple[float, ...] | None = None,
) -> CurveFit:
    """Fit one curve (energies Ha, standard errors Ha); ``exact``: the exact curve's
    (equilibrium, E(first) - E(last) in Ha) for the errors."""
    m = spline_minimum(xs, es)
    eq_std = curv_std = None
    if m is not None and any(s > 0 for s in stds_ha):
        h = 1e-6
        dx2 = dc2 = 0.0
        for i, s in enumerate(stds_ha):
            if s <= 0:
                continue
            e2 = list(es)
            e2[i] += h
            m2 = spline_minimum(xs, e2)
            if m2 is None:
                continue
            dx2 += ((m2[0] - m[0]) / h * s) ** 2
            dc2 += ((m2[1] - m[1]) / h * s) ** 2
        eq_std, curv_std = math.sqrt(dx2), math.sqrt(dc2)
    diff = float(es[0] - es[-1])
    ex_eq = exact[0] if exact else None
    ex_diff = exact[1] if exact else diff
    return CurveFit(
        curve=name,
        equilibrium=None if m is None else m[0],
        equilibrium_std=eq_std,
        curvature_ha=None if m is None else m[1],
        curvature_std_ha=curv_std,
        equilibrium_error=None if m is None or ex_eq is None else m[0] - ex_eq,
        difference_mha=diff * 1000.0,
        difference_std_mha=math.hypot(stds_ha[0], stds_ha[-1]) * 1000.0,
        difference_error_mha=(diff - ex_diff) * 1000.0,
    )


# ---------------------------------------------------------------- the result


@dataclasses.dataclass(frozen=True)
class ScanResult:
    """``scan``: the points (ordered by coordinate), the fits and notes."""

    study_name: str
    device_name: str
    axis: ScanAxis
    recipes: tuple[str, ...]
    target_mha: float
    confidence: float
    shots: int
    points: tuple[ScanPoint, ...]
    fits: tuple[CurveFit, ...]
    notes: tuple[str, ...]
    stats: RunStats
    caution: str = CAUTION

    @property
    def coordinates(self) -> tuple[float, ...]:
        return tuple(p.coordinate for p in self.points)

    @property
    def axis_label(self) -> str:
        if self.axis.kind == "bond":
            i, j = self.axis.atoms or (0, 1)
            return f"distance of atoms {i}-{j} (Angstrom)"
        return "scale factor of all distances (1 = study geometry)"

    @property
    def coordinate_words(self) -> str:
        return self.axis_label

    def fit(self, curve: str) -> CurveFit:
        return next(f for f in self.fits if f.curve == curve)

    def to_json(self) -> dict[str, Any]:
        return jsonable(
            {
                "study": self.study_name,
                "device": self.device_name,
                "axis": dataclasses.asdict(self.axis) | {"unit": self.axis.unit},
                "units": {
                    "energy": "Ha",
                    "bias, std, difference": "mHa",
                    "curvature": f"Ha/{self.axis.unit}^2",
                },
                "target_mha": self.target_mha,
                "confidence": self.confidence,
                "shots": self.shots,
                "recipes": list(self.recipes),
                "points": [dataclasses.asdict(p) for p in self.points],
                "fits": [dataclasses.asdict(f) for f in self.fits],
                "fit_method": "not-a-knot cubic spline through all points, minimized between "
                "the lowest point's neighbours; curvature = its second derivative there; error "
                "bars by linear propagation of each point's standard error; difference = "
                "E(first) - E(last)",
                "warm_start": "each point's optimizer starts first from the nearest optimized "
                "point's parameters (warm_start_from)",
                "notes": list(self.notes),
                "caution": self.caution,
            }
        )

    def csv_rows(self) -> list[dict[str, Any]]:
        rows = []
        for p in self.points:
            row: dict[str, Any] = {
                f"coordinate_{self.axis.unit.lower()}": p.coordinate,
                "exact_energy_ha": p.exact_energy_ha,
                "hf_energy_ha": p.hf_energy_ha,
                "ansatz_energy_ha": p.ansatz_energy_ha,
                "two_qubit_gates": p.two_qubit_gates,
                "hf_stable": p.hf_stable,
            }
            for e in p.entries:
                row[f"{e.recipe}_energy_ha"] = e.energy_ha
                row[f"{e.recipe}_bias_mha"] = e.bias_mha
                row[f"{e.recipe}_std_mha"] = e.std_mha
                row[f"{e.recipe}_p_within_target"] = e.p_within_target
                row[f"{e.recipe}_reaches_target"] = e.reaches_target
            rows.append(row)
        return rows


def derive(points: Sequence[ScanPoint], recipes: Sequence[str]) -> tuple[CurveFit, ...]:
    """The fits of the exact, Hartree-Fock, ansatz and every recipe's curve."""
    xs = [p.coordinate for p in points]
    zero = [0.0] * len(points)
    exact_e = [p.exact_energy_ha for p in points]
    ex = fit_curve("exact", xs, exact_e, zero)
    ref = (
        (ex.equilibrium, exact_e[0] - exact_e[-1])
        if ex.equilibrium is not None
        else (None, exact_e[0] - exact_e[-1])
    )
    out = [dataclasses.replace(ex, equilibrium_error=None if ex.equilibrium is None else 0.0)]
    out.append(fit_curve("hartree_fock", xs, [p.hf_energy_ha for p in points], zero, ref))
    out.append(fit_curve("ansatz", xs, [p.ansatz_energy_ha for p in points], zero, ref))
    for name in recipes:
        es = [p.recipe(name).energy_ha for p in points]
        ss = [p.recipe(name).std_mha / 1000.0 for p in points]
        out.append(fit_curve(name, xs, es, ss, ref))
    return tuple(out)


def scan_notes(points: Sequence[ScanPoint], target_mha: float) -> tuple[str, ...]:
    """Warnings: the ansatz error jumping between neighbours by more than the target; the
    Hartree-Fock solution changing character (stable at one point, unstable at the next)."""
    notes = []
    for a, b in itertools.pairwise(points):
        if a.hf_stable != b.hf_stable:
            bad = b if a.hf_stable else a
            notes.append(
                f"Hartree-Fock changes character between {a.coordinate:g} and {b.coordinate:g}: "
                f"at {bad.coordinate:g} {bad.hf_instability}; there the Hartree-Fock curve, the "
                "ansatz's start and the active orbitals come from an unstable solution"
            )
    if points and not any(p.hf_stable for p in points):
        notes.append(f"Hartree-Fock is unstable at every point ({points[0].hf_instability})")
    for a, b in itertools.pairwise(points):
        if abs(b.ansatz_error_mha - a.ansatz_error_mha) > target_mha:
            notes.append(
                f"ansatz error jumps from {a.ansatz_error_mha:.3g} to {b.ansatz_error_mha:.3g} "
                f"mHa between {a.coordinate:g} and {b.coordinate:g}"
            )
    return tuple(notes)


# ---------------------------------------------------------------- the job


def scan(
    study_or_path: Study | str | Path,
    *,
    bond: Sequence[int] | None = None,
    scale: bool | None = None,
    start: float | None = None,
    stop: float | None = None,
    points: int | None = None,
    refine: int | None = None,
    recipes: Sequence[str] | None = None,
    cache: ResultsCache | str | Path | bool | None = None,
    seed: int | None = None,
    shots: int | None = None,
    workers: int | None = None,
    executor: Any = None,
    cluster: Any = None,
    progress: ProgressHook | None = None,
    on_point: Callable[[ScanPoint], None] | None = None,
    method: str | None = None,
    trajectories: int | None = None,
) -> ScanResult:
    """Scan the study's geometry along one coordinate (see the module docstring).

    ``recipes``: the study's recipes to follow (raw always first; default the scan: section's,
    else all). ``on_point(point)`` runs in the calling process as each point finishes.
    """
    job = start_job(
        study_or_path, cache, seed=seed, shots=shots, method=method, trajectories=trajectories
    )
    study, store, t0 = job.study, job.store, job.t0
    axis = scan_axis(study, bond, scale, start, stop, points, refine)
    where = arg("recipes")
    if recipes is None:
        section = study.raw.get("scan") if isinstance(study.raw, dict) else None
        recipes = (section or {}).get("recipes")
        where = "scan.recipes"
    picked = chosen_recipes(study, recipes, where=where)
    for v in (axis.start, axis.stop):  # refuse a bad geometry before any work
        study_at(study, axis, v)
    done: dict[float, ScanPoint] = {}
    optima: dict[float, np.ndarray] = {}
    totals = [0, 0, 0.0]
    own = executor is None
    ex = make_executor(workers, cluster) if own else executor
    try:
        if not store.enabled:  # the workers start (seconds) while the first points optimize
            _start(ex)
        values = list(axis.grid())
        for rnd in range(axis.refine + 1):
            _run_points(
                study, axis, values, picked, store, ex, done, optima, totals, progress, on_point
            )
            if rnd == axis.refine:
                break
            pts = sorted(done.values(), key=lambda p: p.coordinate)
            m = spline_minimum([p.coordinate for p in pts], [p.exact_energy_ha for p in pts])
            if m is None:
                break
            d = (axis.stop - axis.start) / (axis.points - 1) / 4 ** (rnd + 1)
            values = [v for v in (m[0] - d, m[0] + d) if all(abs(v - c) > 1e-6 for c in done)]
    finally:
        if own:
            ex.close()
    pts = tuple(sorted(done.values(), key=lambda p: p.coordinate))
    names = tuple(n for n, _ in picked)
    notes = list(scan_notes(pts, study.target_mha))
    if spline_minimum([p.coordinate for p in pts], [p.exact_energy_ha for p in pts]) is None:
        notes.append(
            "the exact curve's lowest point is at an end of the scan: no equilibrium fitted"
        )
    return ScanResult(
        study_name=study.name,
        device_name=str(study.profile.name),
        axis=axis,
        recipes=names,
        target_mha=float(study.target_mha),
        confidence=float(study.confidence),
        shots=int(study.shots),
        points=pts,
        fits=derive(pts, names),
        notes=tuple(notes),
        stats=RunStats(
            totals[0],
            totals[1],
            totals[2],
            time.perf_counter() - t0,
            str(getattr(ex, "description", "in-process")),
        ),
    )


def _start(ex: Any) -> None:
    """Start the executor's workers without waiting for them (executors without ``start``:
    nothing to do)."""
    start = getattr(ex, "start", None)
    if start is not None:
        start()


def _run_points(
    study: Study,
    axis: ScanAxis,
    values: Sequence[float],
    picked: Any,
    store: ResultsCache,
    ex: Any,
    done: dict[float, ScanPoint],
    optima: dict[float, np.ndarray],
    totals: list[Any],
    progress: ProgressHook | None,
    on_point: Callable[[ScanPoint], None] | None,
) -> None:
    """Optimize ``values`` in order (warm starts); each uncached point goes to the executor as
    soon as its optimum is known, so the next optimizations overlap the running points."""
    keys: list[str] = []
    total = len(values)
    count = [0]

    def advance() -> None:
        if progress is not None:
            count[0] += 1
            progress("scan points", count[0], total)

    def tasks() -> Iterator[PointTask]:
        for v in values:
            s = study_at(study, axis, v)
            near = min(optima, key=lambda c: abs(c - v)) if optima else None
            opt = _warm_optimum(s, None if near is None else optima[near], store)
            optima[v] = np.asarray(opt.parameters)
            key = _point_key(s, picked, opt)
            hit = store.get(POINT_KIND, key) if store.enabled else None
            if hit is not None:
                try:
                    done[v] = point_from_record(json.loads(hit[0]))
                except (ValueError, TypeError, KeyError):
                    pass
                else:
                    totals[1] += 1
                    advance()
                    if on_point is not None:
                        on_point(done[v])
                    continue
            if not keys:  # a resumed scan starts no worker unless a point is missing
                _start(ex)
            keys.append(key)
            yield PointTask(v, s, picked, store, opt, near)

    if progress is not None:
        progress("scan points", 0, total)

    def finished(i: int, out: PointOutcome) -> None:
        done[out.point.coordinate] = out.point
        if store.enabled:
            store.put(
                POINT_KIND, keys[i], json.dumps(jsonable(dataclasses.asdict(out.point))).encode()
            )
        totals[0] += out.simulations
        totals[1] += out.cache_hits
        totals[2] += out.engine_seconds
        advance()
        if on_point is not None:
            on_point(out.point)

    if getattr(ex, "in_process", True):
        for i, t in enumerate(tasks()):
            finished(i, run_point(t))
    else:
        ex.map(run_point, tasks(), on_result=finished)


def write_scan_data(result: ScanResult, out: str | Path) -> list[Path]:
    """scan.json and scan.csv into ``out`` (atomic writes)."""
    folder = Path(out)
    return [
        write_text_atomic(folder / "scan.json", json.dumps(result.to_json(), indent=2) + "\n"),
        write_text_atomic(folder / "scan.csv", csv_text(result.csv_rows())),
    ]
