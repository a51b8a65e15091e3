"""Every key a study file and a device profile accept, read from the pydantic models.

``study_keys()`` and ``profile_keys()`` walk the models (:class:`~noiselab.study.spec.StudyFile`
and the models its free-form sections are validated by, :class:`DeviceProfile`) and return one
:class:`KeyInfo` per key: type, default, unit, allowed values and one line of meaning. Types,
defaults and bounds come from the models; a meaning comes from the field's ``description`` or
from :data:`MEANINGS` (a test checks that every key has one and that no entry is stale), and
bounds a validator checks in code from :data:`ALLOWED`. ``keys_markdown()`` is the reference
page ``docs/study-keys.md`` (a test keeps it in sync).

Over 400 lines: most of it is the one-line meaning of every key (data, one table), kept beside
the walk that reads it so that a stale or missing entry is found in one place.
"""

from __future__ import annotations

import types
import typing
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any, Literal

from pydantic import BaseModel
from pydantic.fields import FieldInfo

from noiselab.chem.molecule import MoleculeSpec
from noiselab.common.counts import MAX_SHOTS, whole_number
from noiselab.common.units import CHEMICAL_ACCURACY_MHA
from noiselab.device.profile import (
    MAX_COHERENCE_US,
    MAX_DURATION_NS,
    MIN_COHERENCE_US,
    MIN_DURATION_NS,
    DeviceProfile,
)
from noiselab.mitigate.passes.extrapolate import MAX_SCALE_FACTOR
from noiselab.mitigate.registry import PASSES
from noiselab.study.grid import axis_values
from noiselab.study.knobs import KNOBS
from noiselab.study.rehearse_spec import RehearseSettings
from noiselab.study.scan import ScanSection
from noiselab.study.spec import ANSATZ_KINDS, StudyFile


@dataclass(frozen=True)
class KeyInfo:
    """One key: dotted ``path`` (``<name>`` a name of yours, ``[i]`` a list entry), ``applies``
    (which ansatz kind or pass the key belongs to; empty: always), and its description."""

    path: str
    type: str
    default: str
    unit: str
    allowed: str
    meaning: str
    applies: str = ""

    @property
    def name(self) -> str:
        """The key as written in the file (the last part of the path)."""
        return self.path.rsplit(".", 1)[-1].split("[", 1)[0]


REQUIRED = "required"

#: One line of meaning per key path (for fields without a ``description``).
MEANINGS: dict[str, str] = {
    # study: top level
    "name": "the study's name (used in outputs and figure titles)",
    "description": "free text shown in reports",
    "molecule": "the molecule: atoms, basis, charge, spin, active space (one of molecule, "
    "integrals, hamiltonian is required)",
    "encoding": "fermion-to-qubit encoding",
    "drop_fixed_parity_qubits": "drop the two qubits the parity encoding fixes (parity only)",
    "ansatz": "the trial-state circuit (kind uccsd or layered; or circuit: a file)",
    "integrals": "the problem from an integrals file instead of molecule: {fcidump: FILE}",
    "hamiltonian": "the problem as a qubit Hamiltonian file instead of molecule: {file: FILE}",
    "circuit": "the trial circuit from a file instead of ansatz: {file: FILE, ...}",
    "ansatz.kind": "which trial-state circuit",
    "device": "the device profile: a path relative to the study file, a shipped profile name "
    "(noiselab shipped) or an inline mapping with the profile keys",
    "layout": "physical qubits to run on, one per logical qubit (default: the best patch)",
    "compile": "how the trial circuit is compiled to the device",
    "shots": "total shots per energy estimate (split over bases and circuit variants)",
    "target_mha": "the error the experiment must stay within (default: chemical accuracy)",
    "confidence": "probability with which the error must stay within the target",
    "recipes": "mitigation recipes to score, by name of your choice",
    "recipes.<name>": "a list of passes: readout corrections, then postselect, then extrapolate",
    "recipes.<name>[i].pass": "which mitigation pass",
    "seed": "seed of every random draw of shots (never moves a bias)",
    "amplification_spread": "relative standard deviation of each amplified noise scale "
    "(zero-noise extrapolation; 0: ideal amplification)",
    "amplification_offset": "relative systematic error of the stretch amplifier (enters the bias)",
    "tune": "the grid of settings that noiselab tune ranks",
    "sweep": "defaults of noiselab sweep for this study",
    "scan": "defaults of noiselab scan for this study",
    "emulation": "how the noisy circuits are emulated",
    "rehearse": "how noiselab rehearse runs the variational loop on the emulated device",
    # molecule
    "molecule.geometry": "atoms: a list of [symbol, x, y, z], or 'H 0 0 0; H 0 0 0.74'",
    "molecule.basis": "Gaussian basis set name (as PySCF knows it)",
    "molecule.charge": "total charge",
    "molecule.spin": "2S = number of alpha minus beta electrons",
    "molecule.active_space": "active electrons and orbitals (the doubly occupied ones below "
    "are frozen; default: every orbital)",
    "molecule.active_space.electrons": "active electrons",
    "molecule.active_space.orbitals": "active spatial orbitals",
    "molecule.symmetry": "let PySCF use point-group symmetry in the SCF",
    # ansatz
    "ansatz.singles": "include single excitations",
    "ansatz.doubles": "include double excitations",
    "ansatz.max_iterations": "most optimizer iterations per start",
    "ansatz.layers": "rotation-plus-entangler layers",
    "ansatz.pairs": "entangling pairs: linear, ring, all, or a list of [a, b] logical qubits",
    "ansatz.entangler": "two-qubit gate of each entangling pair",
    # compile
    "compile.optimization_level": "transpiler optimization level",
    "compile.seeds": "transpiler seeds tried; the compile with fewest two-qubit gates is used",
    "compile.bias_spread": "also compute every bias on the other distinct compiles",
    # tune
    "tune.readout": "readout-correction methods to try (none: no correction)",
    "tune.postselect": "postselection modes to try (none: no postselection)",
    "tune.amplifier": "amplifiers to try (none: no extrapolation; clifford_regression: "
    "Clifford data regression in place of an extrapolation)",
    "tune.scales": "noise scale sets to try, each a list of at least two factors",
    "tune.fit": "extrapolation fits to try",
    # sweep
    "sweep.knob": "the knob to vary",
    "sweep.start": "first value, in the knob's base units",
    "sweep.stop": "last value, in the knob's base units",
    "sweep.points": "number of values",
    "sweep.log": "space the values logarithmically",
    "sweep.recipes": "recipes to follow (names under recipes)",
    "sweep.coherence_gate_errors": "coherence_us knob only: follow (the relaxation part of "
    "each quoted gate error moves with T1/T2, the rest is held) or fixed (quoted gate errors "
    "kept); default follow",
    # scan
    "scan.bond": "the two atoms (0-based) whose bond is stretched",
    "scan.scale": "scale the whole geometry instead of one bond",
    "scan.start": "first bond length (Angstrom) or scale factor",
    "scan.stop": "last bond length (Angstrom) or scale factor",
    "scan.points": "points of the first pass",
    "scan.refine": "refinement passes around each crossing",
    "scan.recipes": "recipes to follow (names under recipes)",
    # emulation
    "emulation.method": "auto (density matrix while it fits; past it, for assess with raw and "
    "per-qubit readout recipes pauli_propagation, else trajectories), "
    "density_matrix, trajectory or pauli_propagation",
    "emulation.trajectories": "Monte Carlo trajectories per circuit variant",
    "emulation.truncation": "truncation of the pauli_propagation method",
    "emulation.truncation.min_abs_coeff": "drop Pauli strings whose |coefficient| (Ha) falls "
    "below this",
    "emulation.truncation.max_weight": "drop strings acting on more qubits (null: no weight cut)",
    "emulation.truncation.estimate": "also estimate the truncation error with its standard "
    "error (seeded Monte Carlo) and the limit |estimate| + 3 standard errors",
    "emulation.truncation.keep_factor": "the estimate carries a dropped term on with "
    "probability |c| / (keep_factor x min_abs_coeff), at most 1 (smaller: tighter, slower)",
    "emulation.batches": "batches the trajectories are split into (their spread is the "
    "trajectory error bar)",
    "emulation.max_density_matrix_qubits": "widest circuit emulated as a density matrix "
    "(default: the memory guard decides)",
    # rehearse
    "rehearse.optimizer": "the optimizer of the rehearsed loop",
    "rehearse.iterations": "optimizer iterations",
    "rehearse.shots_per_evaluation": "shots per energy evaluation in the loop",
    "rehearse.max_shots": "stop once this many shots are spent (calibration included)",
    "rehearse.start": "where the loop starts",
    "rehearse.perturbation_rad": "spread of the perturbation of the noiseless optimum",
    "rehearse.repeats": "independent repeats of the loop",
    "rehearse.seed": "seed of the rehearsal's random draws",
    "rehearse.loop_recipe": "recipe of every in-loop evaluation (a list of passes)",
    "rehearse.loop_recipe[i].pass": "which mitigation pass",
    "rehearse.final_recipe": "study recipe of the final estimate (default: the loop recipe)",
    "rehearse.circuit_overhead_s": "time to load and start one circuit",
    "rehearse.spsa": "SPSA gains",
    "rehearse.spsa.a": "step gain (default: calibrated from first_step)",
    "rehearse.spsa.c": "perturbation size",
    "rehearse.spsa.stability": "stability constant (default: 10 % of the iterations)",
    "rehearse.spsa.learning_exponent": "decay exponent of the step gain",
    "rehearse.spsa.perturbation_exponent": "decay exponent of the perturbation",
    "rehearse.spsa.first_step": "average first move of each parameter (rad)",
    "rehearse.spsa.first_step_rule": "curvature: first move to the minimum of the parabola "
    "through the calibration energies, at most first_step; fixed: first_step itself",
    "rehearse.spsa.calibration_samples": "gradient samples that calibrate a",
    "rehearse.parameter_shift": "gradient descent with parameter-shift gradients",
    "rehearse.parameter_shift.learning_rate": "step = learning_rate x gradient (Ha/rad)",
    "rehearse.cobyla": "COBYLA options",
    "rehearse.cobyla.rhobeg": "initial trust-region radius (rad)",
    "rehearse.cobyla.tol": "stopping tolerance",
    "rehearse.nelder_mead": "Nelder-Mead options",
    "rehearse.nelder_mead.initial_step": "initial simplex size (rad)",
    "rehearse.nelder_mead.xatol": "stopping tolerance on the parameters",
    "rehearse.nelder_mead.fatol": "stopping tolerance on the energy",
    # pass options (recipes.<name>[i].<option>; the same under rehearse.loop_recipe)
    "readout.method": "how the readout is corrected",
    "readout.calibration_shots": "shots per calibration circuit (0 or null: exact matrices)",
    "postselect.mode": "discard shots that break a symmetry, or verify (rescale by the "
    "symmetry sector's weight)",
    "postselect.symmetries": "symmetries to use (default: every one the encoding keeps)",
    "extrapolate.amplifier": "how the noise is amplified",
    "extrapolate.scales": "noise scale factors (at least two)",
    "extrapolate.fit": "curve fitted through the scaled energies",
    "extrapolate.degree": "degree of the polynomial fit",
    "extrapolate.channels": "channels the stretch amplifier scales (default: all but readout)",
    "extrapolate.shot_split": "how the shots are split over the scale factors",
    "extrapolate.scale_axis": "folding: fit against the realized or the nominal scale",
    "error_cancellation.idle": "include relaxation over scheduled delays in the learned model",
    "distillation.copy_noise": "emulate the noise of the copy-and-measure circuit (false: ideal)",
    "twirl.gates": "which gates are Pauli-twirled (their errors replaced by the twirled part)",
    "decouple.sequence": "dynamical-decoupling sequence inserted in idle windows (X-X or XY4)",
    "clifford_regression.noise_levels": "stretched-noise levels of the training fit "
    "([1]: plain regression)",
    "clifford_regression.choice_seed": "seed of which rotations the training circuits replace",
    "clifford_regression.intercept": "mixed_state: anchor the fit at the maximally mixed "
    "state's energy; fitted: fit the intercept",
    "clifford_regression.shot_split": "how the shots are split between training and target "
    "circuits",
    "tune.family": "mitigation families to try beside the readout/postselect/extrapolate stack "
    "(none: the stack alone)",
    "tune.suppress": "suppression before mitigation to try: none, or suppression passes joined "
    "by + (measure_twirl only with readout correction; the families run without suppression)",
    "rehearse.grid": "the settings noiselab rehearse --grid tries (every combination)",
    "rehearse.grid.shots_per_evaluation": "shots per evaluation to try",
    "rehearse.grid.optimizer": "optimizers to try",
    "rehearse.grid.loop_recipe": "in-loop recipes to try: study recipe names, or default",
    # device profile
    "name@profile": "the device's name (shown in outputs)",
    "description@profile": "free text about the device",
    "schema_version": "profile format version",
    "qubit_count": "physical qubits (ids 0..qubit_count-1)",
    "links": "linked (two-qubit gate) pairs: a list of [a, b], or all-to-all",
    "native_gates": "the device's native gates",
    "native_gates.single_qubit": "single-qubit native gates",
    "native_gates.two_qubit": "two-qubit native gate",
    "durations": "gate and readout durations",
    "durations.single_qubit_ns": "duration of a single-qubit gate (rz is virtual: zero)",
    "durations.two_qubit_ns": "duration of the two-qubit gate",
    "durations.readout_ns": "duration of a readout",
    "qubits": "per-qubit values: a default and overrides",
    "qubits.default": "values of every qubit unless overridden",
    "qubits.overrides": "values of single qubits, by qubit id",
    "couplers": "per-pair two-qubit gate values: a default and overrides",
    "couplers.default": "values of every linked pair unless overridden",
    "couplers.overrides": "values of single pairs",
    "couplers.overrides[i].pair": "the linked pair [a, b]",
    "t1_us": "energy relaxation time T1 (null: infinite, only via scaling)",
    "t2_us": "dephasing time T2 (at most 2 T1)",
    "gate_error": "average gate infidelity (relaxation included)",
    "flip_0to1": "probability of reading 1 when the qubit is in 0",
    "flip_1to0": "probability of reading 0 when the qubit is in 1",
    "over_rotation_fraction": "coherent over-rotation of single-qubit gates "
    "(fraction of the angle)",
    "zz_angle_rad": "residual ZZ phase after each two-qubit gate",
    "zz_rate_khz": "always-on ZZ coupling rate of the pair, acting during idles and other gates",
    "spectator_phase_rad": "phase each two-qubit gate of the pair puts on the other qubits linked "
    "to it",
    "detuning_std_khz": "quasi-static frequency offset (standard deviation; constant within a "
    "shot, Gaussian between shots)",
    "twirled_two_qubit_gates": "set by the twirl pass, not by hand: two-qubit gate errors "
    "replaced by their Pauli-twirled part",
    "zz_during_own_gate": "whether a pair's always-on ZZ also acts during its own two-qubit "
    "gate: in_calibration (no, the default: the gate's conditional phase was calibrated with the "
    "static ZZ present, as on a chip) or extra (yes, on top of the calibrated gate)",
    "readout_crosstalk": "correlated readout errors of linked pairs",
    "readout_crosstalk[i].pair": "the linked pair [a, b]",
    "readout_crosstalk[i].joint_flip": "probability that both bits flip together",
    "readout_crosstalk[i].flip_a_if_b_reads_1": "probability that a's reported bit flips when "
    "b reads 1 (b's reported bit after its own assignment error: b's readout signal is the "
    "disturbance); outcome-dependent, so the readout map is no tensor product",
    "readout_crosstalk[i].flip_b_if_a_reads_1": "probability that b's reported bit flips when "
    "a reads 1",
    "untwirled_readout_flips": "set by the measure_twirl pass, not by hand: [qubit, P(1|0), "
    "P(0|1)] before twirling, of the qubits with outcome-dependent readout flips",
    "drift": "relative day-to-day spreads of the device's values (noiselab assess --drift)",
    "drift.t1_rel_std": "relative standard deviation of T1",
    "drift.t2_rel_std": "relative standard deviation of T2",
    "drift.single_qubit_error_rel_std": "relative standard deviation of single-qubit errors",
    "drift.two_qubit_error_rel_std": "relative standard deviation of two-qubit errors",
    "drift.readout_error_rel_std": "relative standard deviation of readout errors",
    "repetition_delay_us": "time between shots, reset included (default: a common-practice "
    "value in noiselab rehearse)",
}

_COHERENCE = f"{MIN_COHERENCE_US:g} to {MAX_COHERENCE_US:g} us"
_DURATION = f"{MIN_DURATION_NS:g} to {MAX_DURATION_NS:g} ns"

#: Allowed values a validator checks in code (where the model's types and bounds do not say).
ALLOWED: dict[str, str] = {
    "name": "letters, digits, '_', '-', '.'; at most 64 characters, starting with a letter "
    "or digit",
    "shots": f"1 to {MAX_SHOTS:.0e}",
    "target_mha": f"> 0 and <= 1000 (chemical accuracy: {CHEMICAL_ACCURACY_MHA:.4f})",
    "confidence": "strictly between 0 and 1",
    "amplification_spread": "0 to 0.5",
    "amplification_offset": "-0.5 to 1",
    "layout": "distinct physical qubit ids of the device, one per logical qubit",
    "recipes": "names: letters, digits, '_' and '-', starting with a letter",
    "recipes.<name>[i].pass": ", ".join(PASSES),
    "rehearse.loop_recipe[i].pass": ", ".join(PASSES),
    "ansatz.kind": ", ".join(ANSATZ_KINDS),
    "ansatz.pairs": "linear, ring, all, or a list of [a, b] logical qubit pairs",
    "links": "all-to-all, or a list of [a, b] physical qubit pairs",
    "sweep.recipes": "names of recipes under recipes",
    "scan.recipes": "names of recipes under recipes",
    "rehearse.final_recipe": "a name of a recipe under recipes",
    "scan.bond": "two distinct atom indices (0-based) that share a bond",
    "sweep.knob": ", ".join(KNOBS),
    "tune.scales": f"factors from 1 to {MAX_SCALE_FACTOR:g}, distinct",
    **{f"tune.{axis}": ", ".join(values) for axis, values in axis_values().items()},
    "extrapolate.scales": f"factors from 1 to {MAX_SCALE_FACTOR:g}, distinct, at least 2",
    "t1_us": _COHERENCE,
    "t2_us": f"{_COHERENCE}, at most 2 x T1",
    "durations.single_qubit_ns": _DURATION,
    "durations.two_qubit_ns": _DURATION,
    "durations.readout_ns": _DURATION,
    "name@profile": "1-80 characters: letters, digits, '.', '_' or '-', starting with a letter "
    "or digit",
}

#: Units of keys whose name does not end in one (``_mha``, ``_us``, ``_ns``, ``_rad``, ``_s``).
UNITS: dict[str, str] = {
    "molecule.geometry": "Angstrom",
    "scan.start": "Angstrom or factor",
    "scan.stop": "Angstrom or factor",
    "gate_error": "probability",
    "flip_0to1": "probability",
    "flip_1to0": "probability",
    "readout_crosstalk[i].joint_flip": "probability",
    "readout_crosstalk[i].flip_a_if_b_reads_1": "probability",
    "readout_crosstalk[i].flip_b_if_a_reads_1": "probability",
    "confidence": "probability",
    "extrapolate.scales": "factor",
    "tune.scales": "factor",
    "shots": "shots",
    "readout.calibration_shots": "shots",
    "rehearse.shots_per_evaluation": "shots",
    "rehearse.max_shots": "shots",
}
_SUFFIX_UNITS = (("_mha", "mHa"), ("_ha", "Ha"), ("_us", "us"), ("_ns", "ns"), ("_rad", "rad"))


# ---------------------------------------------------------------- reading the models


def _is_model(tp: Any) -> bool:
    return isinstance(tp, type) and issubclass(tp, BaseModel)


def _strip(tp: Any) -> tuple[Any, list[Any]]:
    """``tp`` without Annotated, with the metadata it carried (constraints of inner fields)."""
    meta: list[Any] = []
    while typing.get_origin(tp) is typing.Annotated:
        args = typing.get_args(tp)
        tp = args[0]
        for item in args[1:]:
            meta += list(item.metadata) if isinstance(item, FieldInfo) else [item]
    return tp, meta


def _union_args(tp: Any) -> tuple[Any, ...] | None:
    if typing.get_origin(tp) in (typing.Union, types.UnionType):
        return typing.get_args(tp)
    return None


def _is_count(meta: list[Any]) -> bool:
    return any(getattr(m, "func", None) is whole_number for m in meta)


def _type_name(tp: Any, meta: list[Any] | None = None) -> str:
    tp, inner = _strip(tp)
    meta = [*(meta or []), *inner]
    union = _union_args(tp)
    if union is not None:
        parts = [_type_name(a).replace("one of", "word") for a in union if a is not type(None)]
        text = " or ".join(dict.fromkeys(parts))
        return f"{text} or null" if type(None) in union else text
    origin = typing.get_origin(tp)
    if origin is Literal:
        return "one of"
    if origin in (list, tuple):
        args = typing.get_args(tp)
        if origin is tuple and args and args[-1] is not Ellipsis:
            names = [_type_name(a) for a in args]
            if len(set(names)) == 1:
                return f"pair of {names[0]}s" if len(names) == 2 else f"{len(names)} {names[0]}s"
            return "[" + ", ".join(names) + "]"
        item = _type_name(args[0]) if args else "value"
        return "list of words" if item == "one of" else f"list of {item}"
    if origin is dict:
        return "mapping"
    if _is_model(tp):
        return "section"
    if tp is bool:
        return "true/false"
    if tp is int:
        return "whole number" if _is_count(meta) else "integer"
    if tp is float:
        return "number"
    if tp is str:
        return "text"
    return getattr(tp, "__name__", str(tp))


def _literals(tp: Any) -> list[Any]:
    tp, _ = _strip(tp)
    union = _union_args(tp)
    if union is not None:
        return [v for a in union for v in _literals(a)]
    if typing.get_origin(tp) is Literal:
        return list(typing.get_args(tp))
    if typing.get_origin(tp) in (list, tuple):
        args = typing.get_args(tp)
        if args and (len(args) == 1 or args[-1] is Ellipsis):
            return _literals(args[0])
    return []


def _bounds(tp: Any, meta: list[Any]) -> str:
    """'>= 1, <= 64' from Ge/Gt/Le/Lt (field and inner type), lengths as 'at least N'."""
    _, inner = _strip(tp)
    union = _union_args(_strip(tp)[0])
    for arg in union or ():
        inner += _strip(arg)[1]
    parts = []
    for m in [*meta, *inner]:
        # pydantic's constraint records (annotated_types' Ge, Gt, Le, Lt, MinLen, MaxLen) by
        # their one attribute: annotated_types is pydantic's dependency, not ours
        for attr, sign in (("ge", ">="), ("gt", ">"), ("le", "<="), ("lt", "<")):
            value = getattr(m, attr, None)
            if value is not None and not callable(value):
                parts.append(f"{sign} {value:g}" if isinstance(value, float) else f"{sign} {value}")
        low = getattr(m, "min_length", None)
        if isinstance(low, int) and low > 0:
            parts.append(f"at least {low} entr{'y' if low == 1 else 'ies'}")
        high = getattr(m, "max_length", None)
        if isinstance(high, int):
            parts.append(f"at most {high} entries")
    return ", ".join(dict.fromkeys(parts))


def _default(field: FieldInfo) -> str:
    if field.is_required():
        return REQUIRED
    factory = field.default_factory
    value = factory() if factory is not None else field.default  # type: ignore[call-arg]
    if type(value).__name__ == "PydanticUndefinedType":  # pydantic's "no default" marker
        return REQUIRED
    if value is None:
        return "null"
    if isinstance(value, BaseModel):
        return "(section defaults)"
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, float):
        return f"{value:.6g}"
    if isinstance(value, tuple | list):
        return "[" + ", ".join(f"{v:g}" if isinstance(v, float) else str(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{}" if not value else str(value)
    return repr(value) if isinstance(value, str) else str(value)


def _unit(lookup: tuple[str, ...], name: str) -> str:
    for key in lookup:
        if key in UNITS:
            return UNITS[key]
    for suffix, unit in _SUFFIX_UNITS:
        if name.endswith(suffix):
            return unit
    return "s" if name.endswith("_s") else ""


def _first(table: dict[str, str], lookup: tuple[str, ...]) -> str:
    return next((table[k] for k in lookup if k in table), "")


def _row(
    path: str, field: FieldInfo, lookup: tuple[str, ...], applies: str, used: set[str]
) -> KeyInfo:
    """One key's row; ``lookup``: the keys of MEANINGS/ALLOWED/UNITS to try, most specific first."""
    tp, meta = field.annotation, list(field.metadata)
    name = path.rsplit(".", 1)[-1].split("[", 1)[0]
    literals = _literals(tp)
    allowed = _first(ALLOWED, lookup)
    if not allowed and literals:
        allowed = ", ".join("null" if v is None else str(v) for v in literals)
    bounds = _bounds(tp, meta)
    if bounds and not allowed:
        allowed = bounds
    meaning = field.description or _first(MEANINGS, lookup)
    used.update(k for k in lookup if k in MEANINGS or k in ALLOWED or k in UNITS)
    return KeyInfo(
        path=path,
        type=_type_name(tp, meta),
        default=_default(field),
        unit=_unit(lookup, name),
        allowed=allowed,
        meaning=meaning,
        applies=applies,
    )


def _sub_model(tp: Any) -> tuple[type[BaseModel] | None, str]:
    """The model inside a field type and the path suffix it adds ('', '[i]', '.<qubit>')."""
    tp, _ = _strip(tp)
    for arg in _union_args(tp) or (tp,):
        arg, _ = _strip(arg)
        if _is_model(arg):
            return arg, ""
        origin = typing.get_origin(arg)
        args = typing.get_args(arg)
        if origin in (list, tuple) and args and _is_model(args[0]):
            return args[0], "[i]"
        if origin is dict and len(args) == 2 and _is_model(args[1]):
            return args[1], ".<qubit>"
    return None, ""


def _walk(
    model: type[BaseModel],
    prefix: str,
    used: set[str],
    *,
    applies: str = "",
    local: str = "",
    skip: frozenset[str] = frozenset(),
    suffix: str = "",
) -> Iterator[KeyInfo]:
    """Rows of ``model``'s fields under ``prefix``; ``local``: the short lookup prefix (a pass
    name for pass options); ``suffix``: tried after each lookup key (``@profile``)."""
    for name, field in model.model_fields.items():
        if name in skip:
            continue
        path = f"{prefix}.{name}" if prefix else name
        keys = [path]
        if local:
            keys.append(f"{local}.{name}")
        keys.append(_generic(path))
        keys.append(name)
        lookup = tuple(dict.fromkeys([*(k + suffix for k in keys if suffix), *keys]))
        yield _row(path, field, lookup, applies, used)
        sub, more = _sub_model(field.annotation)
        if sub is not None:
            yield from _walk(
                sub,
                path + more,
                used,
                applies=applies,
                local=f"{local}.{name}" if local else "",
                suffix=suffix,
            )


def _generic(path: str) -> str:
    """``qubits.overrides.<qubit>.t1_us`` -> ``t1_us``-style lookups strip the sections."""
    return path.replace(".<qubit>", "")


def _pass_keys(prefix: str, used: set[str]) -> Iterator[KeyInfo]:
    for name, cls in PASSES.items():
        yield from _walk(cls.Options, prefix, used, applies=f"pass {name}", local=name)


def _section(path: str, type_: str, default: str, used: set[str]) -> KeyInfo:
    used.update(k for k in (path,) if k in MEANINGS or k in ALLOWED)
    return KeyInfo(
        path=path,
        type=type_,
        default=default,
        unit=_unit((path,), path),
        allowed=ALLOWED.get(path, ""),
        meaning=MEANINGS.get(path, ""),
    )


# sections of StudyFile typed as free mappings: validated by their own models
_EXPANDED = frozenset({"molecule", "ansatz", "recipes", "scan", "rehearse"})


def _study_rows(used: set[str]) -> Iterator[KeyInfo]:
    fields = StudyFile.model_fields
    for name, field in fields.items():
        if name not in _EXPANDED:
            lookup = (name, *(("device",) if name == "device" else ()))
            yield _row(name, field, lookup, "", used)
            sub, more = _sub_model(field.annotation)
            if sub is not None:
                yield from _walk(sub, name + more, used)
            continue
        if name == "molecule":
            yield _section("molecule", "section", _default(field), used)
            yield from _walk(MoleculeSpec, "molecule", used)
        elif name == "ansatz":
            yield _section("ansatz", "section", _default(field), used)
            kind = KeyInfo(
                "ansatz.kind",
                "one of",
                REQUIRED,
                "",
                ALLOWED["ansatz.kind"],
                MEANINGS["ansatz.kind"],
            )
            used.add("ansatz.kind")
            yield kind
            for kind_name, model in ANSATZ_KINDS.items():
                yield from _walk(
                    model, "ansatz", used, applies=f"kind {kind_name}", skip=frozenset({"kind"})
                )
        elif name == "recipes":
            yield _row("recipes", field, ("recipes",), "", used)
            yield _section("recipes.<name>", "list of passes", "", used)
            yield _section("recipes.<name>[i].pass", "one of", REQUIRED, used)
            yield from _pass_keys("recipes.<name>[i]", used)
        elif name == "scan":
            yield _row("scan", field, ("scan",), "", used)
            yield from _walk(ScanSection, "scan", used)
        elif name == "rehearse":
            yield _row("rehearse", field, ("rehearse",), "", used)
            for row in _walk(RehearseSettings, "rehearse", used):
                yield row
                if row.path == "rehearse.loop_recipe":
                    yield _section("rehearse.loop_recipe[i].pass", "one of", REQUIRED, used)
                    yield from _pass_keys("rehearse.loop_recipe[i]", used)


def study_keys() -> tuple[KeyInfo, ...]:
    """Every key of a study file, in file order (sections before their keys)."""
    return tuple(_study_rows(set()))


def profile_keys() -> tuple[KeyInfo, ...]:
    """Every key of a device profile (also the keys of a study's inline ``device:``)."""
    return tuple(_walk(DeviceProfile, "", set(), suffix="@profile"))


def lookup_keys_used() -> set[str]:
    """The MEANINGS/ALLOWED/UNITS entries the walk reads (a test finds the stale ones)."""
    used: set[str] = set()
    list(_study_rows(used))
    list(_walk(DeviceProfile, "", used, suffix="@profile"))
    return used


# ---------------------------------------------------------------- text


HEADERS = ("key", "type", "default", "unit", "allowed", "meaning")


def key_cells(row: KeyInfo) -> tuple[str, ...]:
    """The row as table cells (``applies`` is shown after the meaning)."""
    meaning = f"{row.meaning} ({row.applies})" if row.applies else row.meaning
    return (row.path, row.type, row.default, row.unit, row.allowed, meaning)


def _md_cell(text: str) -> str:
    return text.replace("|", "\\|").replace("<", "&lt;").replace(">", "&gt;") if text else ""


def _md_table(rows: tuple[KeyInfo, ...]) -> list[str]:
    out = ["| " + " | ".join(HEADERS) + " |", "|" + "---|" * len(HEADERS)]
    for row in rows:
        cells = key_cells(row)
        out.append(
            "| `" + _md_cell(cells[0]) + "` | " + " | ".join(_md_cell(c) for c in cells[1:]) + " |"
        )
    return out


def keys_markdown() -> str:
    """The reference page ``docs/study-keys.md`` (generated; ``noiselab study keys --markdown``)."""
    lines = [
        "# Study and profile keys",
        "",
        "Generated from the models by `noiselab study keys --markdown`; do not edit by hand "
        "(tests/test_study_keys.py checks that this page matches the code).",
        "",
        "`<name>` stands for a name of your choice, `[i]` for each entry of a list, `<qubit>` "
        "for a qubit id. Pass options apply under `recipes.<name>[i]` and "
        "`rehearse.loop_recipe[i]` alike.",
        "",
        "## Study file",
        "",
        *_md_table(study_keys()),
        "",
        "## Device profile (a profile file, or a study's inline `device:` mapping)",
        "",
        *_md_table(profile_keys()),
        "",
    ]
    return "\n".join(lines)
