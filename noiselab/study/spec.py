"""Study files: one YAML file says which molecule, which device, which budget and which recipes.

``load_study(path)`` reads and validates the file and returns a resolved :class:`Study` (device
profile loaded, molecule and recipes validated by their own layers). Every problem is one
:class:`~noiselab.common.errors.InputError` line naming the study file and the key.

Over 400 lines: the study file's pydantic sections, the command-line overrides validated by
the same models, and the resolution of molecule, device and recipes form one validation pass
whose messages name the file and key; its sections are small models without logic of their
own.
"""

from __future__ import annotations

import dataclasses
import math
import os
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    StrictBool,
    StrictInt,
    ValidationError,
    field_validator,
    model_validator,
)

from noiselab.chem.circuit_file import read_circuit_file
from noiselab.chem.molecule import molecule_from_mapping
from noiselab.chem.operator_file import operator_source
from noiselab.chem.sources import fcidump_source, read_xyz, source_qubit_count
from noiselab.common.counts import MAX_SEED, MAX_SHOTS, Count, whole_number
from noiselab.common.errors import (
    InputError,
    arg,
    did_you_mean,
    from_validation_error,
    input_error,
    quote,
)
from noiselab.common.shipped import looks_like_name, shipped_path
from noiselab.common.units import CHEMICAL_ACCURACY_MHA
from noiselab.common.yamlio import load_yaml_mapping
from noiselab.device.profile import load_profile, profile_from_mapping
from noiselab.emulate.pauli_truncation import KEEP_FACTOR
from noiselab.mitigate.passes.extrapolate import MAX_SCALE_FACTOR
from noiselab.mitigate.recipe import parse_recipe
from noiselab.mitigate.variants import DEFAULT_AMPLIFICATION_SPREAD
from noiselab.study.grid import check_tune_section
from noiselab.study.knobs import KNOBS, unknown_knob
from noiselab.study.preflight import check_sizes
from noiselab.study.rehearse_spec import RehearseSettings

ENCODINGS = ("jordan_wigner", "parity", "bravyi_kitaev")
#: Most points of one sweep (each point is a full set of simulations).
MAX_SWEEP_POINTS = 200
_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


def _starts_within_cap(ansatz: Any) -> Any:
    """``starts`` (the least number of optimizer starts) must not exceed ``max_starts``.

    More starts than ``starts`` run until the two lowest agree (noiselab.chem.optimize);
    ``start_seed`` seeds the random starts, apart from the study's ``seed`` so that ``--seed``
    never moves the noiseless optimum.
    """
    if ansatz.starts > ansatz.max_starts:
        raise ValueError(
            f"max_starts: {ansatz.max_starts} is fewer than starts ({ansatz.starts}); "
            "allowed: max_starts >= starts"
        )
    return ansatz


class UccsdAnsatz(_Strict):
    """Unitary coupled cluster (first-order Trotterized), singles and doubles, from Hartree-Fock."""

    kind: Literal["uccsd"]
    singles: StrictBool = True
    doubles: StrictBool = True
    starts: Count = Field(default=1, ge=1, le=32, description="optimizer starting points")
    max_starts: Count = Field(default=16, ge=1, le=64, description="cap on adaptive starts")
    start_seed: Count = Field(default=0, ge=0, le=MAX_SEED, description="random starts' seed")
    max_iterations: Count = Field(default=2000, ge=1, le=100000)

    @model_validator(mode="after")
    def _check_starts(self) -> UccsdAnsatz:
        return _starts_within_cap(self)

    def label(self) -> str:
        parts = "".join(c for c, on in (("S", self.singles), ("D", self.doubles)) if on)
        return f"UCC{parts}"


class LayeredAnsatz(_Strict):
    """Hardware-efficient layers of ry/rz rotations and entangling pairs, from Hartree-Fock."""

    kind: Literal["layered"]
    layers: Count = Field(default=2, ge=1, le=20)
    pairs: Literal["linear", "ring", "all"] | list[tuple[StrictInt, StrictInt]] = "linear"
    entangler: Literal["cz", "cx"] = "cz"
    starts: Count = Field(default=3, ge=1, le=32, description="optimizer starting points")
    max_starts: Count = Field(default=16, ge=1, le=64, description="cap on adaptive starts")
    start_seed: Count = Field(default=0, ge=0, le=MAX_SEED, description="random starts' seed")
    max_iterations: Count = Field(default=2000, ge=1, le=100000)

    @model_validator(mode="after")
    def _check_starts(self) -> LayeredAnsatz:
        return _starts_within_cap(self)

    def label(self) -> str:
        pairs = self.pairs if isinstance(self.pairs, str) else "custom"
        return f"layered x{self.layers} ({pairs} {self.entangler})"

    def pair_list(self, num_qubits: int) -> list[tuple[int, int]]:
        """Entangling pairs on ``num_qubits`` logical qubits."""
        n = num_qubits
        if self.pairs == "linear":
            return [(q, q + 1) for q in range(n - 1)]
        if self.pairs == "ring":
            return [(q, (q + 1) % n) for q in range(n)] if n > 2 else [(0, 1)][: n - 1]
        if self.pairs == "all":
            return [(a, b) for a in range(n) for b in range(a + 1, n)]
        return [tuple(p) for p in self.pairs]  # type: ignore[misc]


class CircuitSection(_Strict):
    """``circuit: {file: FILE, ...}``: a trial circuit from a file, and its optimizer options."""

    file: str
    starts: Count = Field(default=3, ge=1, le=32, description="optimizer starting points")
    max_starts: Count = Field(default=16, ge=1, le=64, description="cap on adaptive starts")
    start_seed: Count = Field(default=0, ge=0, le=MAX_SEED, description="random starts' seed")
    max_iterations: Count = Field(default=2000, ge=1, le=100000)

    @model_validator(mode="after")
    def _check_starts(self) -> CircuitSection:
        return _starts_within_cap(self)


class CircuitAnsatz(CircuitSection):
    """A trial circuit read from a file (noiselab.chem.circuit_file), with its digest and sizes
    (the digest keys the cached noiseless optimum)."""

    kind: Literal["circuit"] = "circuit"
    sha256: str
    num_qubits: int
    num_parameters: int
    operations: int

    def label(self) -> str:
        return f"circuit {Path(self.file).name} ({self.num_parameters} parameters)"


ANSATZ_KINDS: dict[str, type[BaseModel]] = {"uccsd": UccsdAnsatz, "layered": LayeredAnsatz}


class CompileOptions(_Strict):
    """How the trial circuit is compiled to the device.

    ``seeds``: the circuit is compiled with transpiler seeds 0..seeds-1 and the compile with the
    fewest two-qubit gates (then the shortest schedule) is assessed; its own setting, not the
    study's ``seed``, so that ``--seed`` never changes a bias. ``bias_spread``: assess also
    computes every recipe's bias on the other distinct compiles (one extra simulation per
    distinct compile and circuit variant; density-matrix emulation only).
    """

    optimization_level: Count = Field(default=2, ge=0, le=3)
    seeds: Count = Field(default=8, ge=1, le=64)
    bias_spread: StrictBool = True


class TuneGrid(_Strict):
    """Axes of the mitigation settings grid that ``noiselab tune`` ranks (all combinations).

    ``None`` on an axis means the built-in default for that axis.
    """

    readout: list[str] | None = Field(default=None, min_length=1)
    postselect: list[str] | None = Field(default=None, min_length=1)
    amplifier: list[str] | None = Field(default=None, min_length=1)
    scales: list[list[float]] | None = Field(default=None, min_length=1)
    fit: list[str] | None = Field(default=None, min_length=1)
    family: list[str] | None = Field(default=None, min_length=1)
    suppress: list[str] | None = Field(default=None, min_length=1)

    @field_validator("scales")
    @classmethod
    def _check_scales(cls, value: list[list[float]] | None) -> list[list[float]] | None:
        if value is None:
            return value
        for i, scales in enumerate(value):
            if len(scales) < 2:
                raise ValueError(
                    f"scale set {i} has {len(scales)} factor(s); allowed: at least 2 factors >= 1"
                )
            if any(not math.isfinite(s) or not 1.0 <= s <= MAX_SCALE_FACTOR for s in scales):
                raise ValueError(
                    f"scale set {i} = {quote(scales)}: allowed: factors from 1 to "
                    f"{MAX_SCALE_FACTOR:g} (beyond, every circuit is close to fully depolarized)"
                )
            if len(set(scales)) != len(scales):
                raise ValueError(
                    f"scale set {i} = {scales} repeats a factor; allowed: distinct factors"
                )
        return value


class SweepDefaults(_Strict):
    """Defaults for ``noiselab sweep`` on this study (the command line overrides each).

    ``knob``: the knob to vary (noise_scale, two_qubit_error, single_qubit_error, coherence_us,
    readout_error); ``start`` / ``stop`` in the knob's base units (a probability, microseconds
    or a factor); ``points``; ``log`` spacing; ``recipes`` to follow;
    ``coherence_gate_errors`` (coherence_us only): ``follow`` (default) moves the relaxation
    part of every quoted gate error with T1/T2, ``fixed`` keeps the quoted errors.
    """

    knob: str | None = None
    start: float | None = None
    stop: float | None = None
    points: Count | None = Field(default=None, ge=2, le=MAX_SWEEP_POINTS)
    log: StrictBool | None = None
    recipes: list[str] | None = Field(default=None, min_length=1)
    coherence_gate_errors: Literal["follow", "fixed"] | None = None

    @field_validator("knob")
    @classmethod
    def _check_knob(cls, value: str | None) -> str | None:
        if value is None:
            return value
        if value not in KNOBS:
            raise ValueError(f"{unknown_knob(value)}; allowed: {', '.join(KNOBS)}")
        return value

    @field_validator("start", "stop")
    @classmethod
    def _check_ends(cls, value: float | None) -> float | None:
        if value is not None and (not math.isfinite(value) or value < 0):
            raise ValueError(f"{value}; allowed: a finite number >= 0 in the knob's base units")
        return value


EMULATION_METHODS = ("auto", "density_matrix", "trajectory", "pauli_propagation")
#: Engine defaults (noiselab.emulate.engine.emulate_bases) for the trajectory method.
DEFAULT_TRAJECTORIES = 256
DEFAULT_BATCHES = 16


class TruncationSettings(_Strict):
    """Truncation of the ``pauli_propagation`` method (noiselab.emulate.pauli_propagation).

    ``min_abs_coeff``: Pauli strings whose |coefficient| (Ha) falls below it are dropped;
    ``max_weight``: strings acting on more qubits are dropped (None: no weight cut). The sum
    of what was dropped bounds the truncation error and is reported in mHa. ``estimate``: also
    estimate the truncation error with its standard error (a seeded Monte Carlo estimate of
    what was dropped: each dropped term carried on with probability |c| / (``keep_factor`` x
    ``min_abs_coeff``), at most 1; noiselab.emulate.pauli_truncation) and report the limit
    |estimate| + 3 standard errors; a smaller ``keep_factor`` tightens it at more cost.
    """

    min_abs_coeff: float = Field(default=1e-5, ge=0.0, le=1.0)
    max_weight: Count | None = Field(default=None, ge=1, le=64)
    estimate: bool = True
    keep_factor: float = Field(default=KEEP_FACTOR, gt=0.0, le=1.0)


class EmulationSettings(_Strict):
    """How the noisy circuits are emulated.

    ``method``: ``auto`` (density matrix while it fits the memory guard; past it, for assess
    whose recipes are all raw or per-qubit readout, Pauli propagation, else Monte Carlo
    trajectories), ``density_matrix`` (exact; refuse when too large),
    ``trajectory`` or ``pauli_propagation`` (Heisenberg-picture Pauli strings under the
    Pauli-twirled noise, truncated by ``truncation``; assess and compare only, raw and
    per-qubit readout recipes only).
    ``trajectories``: trajectories per circuit variant, in ``batches`` batches (the batch
    spread gives the trajectory error bar). ``max_density_matrix_qubits``: a cap on the
    circuit width for the density matrix (None: the memory guard alone decides).
    """

    method: Literal["auto", "density_matrix", "trajectory", "pauli_propagation"] = "auto"
    trajectories: Count = Field(default=DEFAULT_TRAJECTORIES, ge=2, le=10**7)
    batches: Count = Field(default=DEFAULT_BATCHES, ge=2, le=10**4)
    max_density_matrix_qubits: Count | None = Field(default=None, ge=1, le=64)
    truncation: TruncationSettings = TruncationSettings()

    @model_validator(mode="after")
    def _check_batches(self) -> EmulationSettings:
        if self.trajectories < self.batches:
            raise ValueError(
                f"trajectories: {self.trajectories} is fewer than batches ({self.batches}); "
                "allowed: trajectories >= batches"
            )
        return self


class StudyFile(_Strict):
    """The study file as written (before the molecule, device and recipes are resolved)."""

    name: str
    description: str | None = None
    #: the problem: exactly one of molecule, integrals ({fcidump: FILE}), hamiltonian ({file: FILE})
    molecule: dict[str, Any] | None = None
    integrals: dict[str, Any] | None = None
    hamiltonian: dict[str, Any] | None = None
    encoding: Literal["jordan_wigner", "parity", "bravyi_kitaev"] = "jordan_wigner"
    drop_fixed_parity_qubits: StrictBool = False
    ansatz: dict[str, Any] | None = None
    #: instead of ansatz: a trial circuit from a file ({file: FILE}, OpenQASM 3 or QPY)
    circuit: dict[str, Any] | None = None
    device: str | dict[str, Any]
    layout: list[StrictInt] | None = Field(default=None, min_length=1)
    compile: CompileOptions = CompileOptions()
    shots: Count = Field(description="total shots per energy estimate")
    target_mha: float = CHEMICAL_ACCURACY_MHA
    confidence: float = 0.95
    recipes: dict[str, list[dict[str, Any]]] = Field(min_length=1)
    seed: Count = Field(default=0, ge=0, le=MAX_SEED)
    #: relative std of the realized noise scale of each amplified point (zero-noise
    #: extrapolation); the default is a stated common-practice value, 0 reproduces ideal
    amplification_spread: float = DEFAULT_AMPLIFICATION_SPREAD
    #: relative, systematic error of the stretch amplifier (enters the bias)
    amplification_offset: float = 0.0
    tune: TuneGrid | None = None
    sweep: SweepDefaults | None = None
    scan: dict[str, Any] | None = None  # validated by noiselab.study.scan (ScanSection)
    emulation: EmulationSettings = EmulationSettings()
    rehearse: RehearseSettings | None = None

    @field_validator("name")
    @classmethod
    def _check_name(cls, value: str) -> str:
        if not _NAME_RE.match(value):
            raise ValueError(
                f"{quote(value)} is not a valid study name; allowed: letters, digits, '_', '-', "
                "'.', "
                "at most 64 characters, starting with a letter or digit"
            )
        return value

    @field_validator("amplification_spread")
    @classmethod
    def _check_spread(cls, value: float) -> float:
        if not (math.isfinite(value) and 0.0 <= value <= 0.5):
            raise ValueError(
                f"{value}; allowed: a relative standard deviation from 0 to 0.5 "
                f"(0: ideal amplification; default {DEFAULT_AMPLIFICATION_SPREAD})"
            )
        return value

    @field_validator("amplification_offset")
    @classmethod
    def _check_offset(cls, value: float) -> float:
        if not (math.isfinite(value) and -0.5 <= value <= 1.0):
            raise ValueError(f"{value}; allowed: a relative offset from -0.5 to 1 (0: none)")
        return value

    @field_validator(
        "target_mha", "confidence", "amplification_spread", "amplification_offset", mode="before"
    )
    @classmethod
    def _no_bool(cls, value: Any) -> Any:
        if isinstance(value, bool):
            raise ValueError("expected a number, got a boolean")
        return value

    @field_validator("shots")
    @classmethod
    def _check_shots(cls, value: int) -> int:
        if not 0 < value <= MAX_SHOTS:
            raise ValueError(f"{value} shots; allowed: a whole number from 1 to {MAX_SHOTS:.0e}")
        return value

    @field_validator("target_mha")
    @classmethod
    def _check_target(cls, value: float) -> float:
        if not (math.isfinite(value) and 0 < value <= 1000.0):
            raise ValueError(
                f"target {value} mHa; allowed: a number of mHa > 0 and <= 1000 "
                f"(chemical accuracy is {CHEMICAL_ACCURACY_MHA:.4f})"
            )
        return value

    @field_validator("confidence")
    @classmethod
    def _check_confidence(cls, value: float) -> float:
        if not (math.isfinite(value) and 0.0 < value < 1.0):
            raise ValueError(f"{value}; allowed: a probability strictly between 0 and 1, e.g. 0.95")
        return value

    @field_validator("layout")
    @classmethod
    def _check_layout(cls, value: list[int] | None) -> list[int] | None:
        if value is None:
            return value
        if any(q < 0 for q in value):
            raise ValueError(f"layout {value}: allowed: physical qubit ids >= 0")
        if len(set(value)) != len(value):
            raise ValueError(
                f"layout {value} names a qubit twice; allowed: distinct physical qubits"
            )
        return value

    @field_validator("recipes")
    @classmethod
    def _check_recipe_names(
        cls, value: dict[str, list[dict[str, Any]]]
    ) -> dict[str, list[dict[str, Any]]]:
        for name in value:
            if not re.match(r"^[A-Za-z][A-Za-z0-9_-]{0,47}$", name):
                raise ValueError(
                    f"recipe name {quote(name)}: allowed: letters, digits, '_' and '-', "
                    "starting with a letter"
                )
        return value


@dataclass(frozen=True)
class Study:
    """A resolved study: validated molecule, loaded device profile, validated recipes."""

    name: str
    source: Path
    molecule: Any  # MoleculeSpec, or FcidumpSource / OperatorSource (noiselab.chem.sources)
    encoding: str
    drop_fixed_parity_qubits: bool
    ansatz: UccsdAnsatz | LayeredAnsatz | CircuitAnsatz
    profile: Any  # noiselab.device.profile.DeviceProfile
    device_source: str  # resolved profile path, or "<inline>"
    layout: tuple[int, ...] | None
    optimization_level: int
    shots: int
    target_mha: float
    confidence: float
    recipes: dict[str, tuple[dict[str, Any], ...]]
    seed: int
    num_qubits: int
    tune: TuneGrid | None = None
    amplification_spread: float = DEFAULT_AMPLIFICATION_SPREAD
    amplification_offset: float = 0.0
    sweep: SweepDefaults | None = None
    description: str | None = None
    emulation: EmulationSettings = field(default_factory=EmulationSettings)
    raw: dict[str, Any] = field(default_factory=dict, repr=False, compare=False)
    compile_seeds: int = 8  # transpiler seeds 0..compile_seeds-1
    compile_bias_spread: bool = True
    rehearse: RehearseSettings | None = None

    @property
    def transpiler_seeds(self) -> tuple[int, ...]:
        return tuple(range(self.compile_seeds))

    def with_overrides(
        self,
        *,
        seed: int | str | None = None,
        shots: int | str | None = None,
        method: str | None = None,
        trajectories: int | str | None = None,
    ) -> Study:
        """The same study with command-line overrides (None keeps the file's value).

        Each override goes through the file's own model (:class:`StudyFile`), bounds included,
        so ``--shots 1e6`` is accepted like ``shots: 1e6`` and ``--shots 2.5``, ``--shots 1e20``
        and ``--seed -1`` are refused like the same values in the file; the message names the
        argument (on the command line, its option). A smaller ``--trajectories`` than the
        file's batches lowers the batches.
        """
        overrides = {"seed": seed, "shots": shots, "method": method, "trajectories": trajectories}
        if all(v is None for v in overrides.values()):
            return self
        base = dict(self.raw) if self.raw else {"emulation": self.emulation.model_dump()}
        data = apply_overrides(base, str(self.source), overrides)
        spec = StudyFile.model_validate(data)

        return dataclasses.replace(
            self, seed=spec.seed, shots=spec.shots, emulation=spec.emulation, raw=data
        )

    def with_seed(self, seed: int | str | None) -> Study:
        """The same study with another seed (None keeps the file's)."""
        return self.with_overrides(seed=seed)

    def with_emulation(
        self, method: str | None = None, trajectories: int | str | None = None
    ) -> Study:
        """The same study with the emulation method and/or trajectory count overridden."""
        return self.with_overrides(method=method, trajectories=trajectories)

    def with_shots(self, shots: int | str | None) -> Study:
        """The same study with another shot budget (None keeps the file's)."""
        return self.with_overrides(shots=shots)


#: Argument of each overridable file key (a refused override names the argument; the command
#: line, its option).
OVERRIDE_ARGUMENTS = {
    "seed": "seed",
    "shots": "shots",
    "emulation.method": "method",
    "emulation.trajectories": "trajectories",
    "emulation.batches": "trajectories",
    "emulation": "trajectories",
}


def apply_overrides(
    data: Mapping[str, Any], source: str, overrides: Mapping[str, Any] | None
) -> dict[str, Any]:
    """The study mapping with command-line overrides merged in and validated by the file's own
    model (:class:`StudyFile`), bounds included.

    ``overrides`` maps ``seed``, ``shots``, ``method``, ``trajectories`` to a value (None: keep
    the file's). ``--shots 1e6`` is accepted like ``shots: 1e6``; ``--shots 2.5``, ``--shots
    1e20`` and ``--seed -1`` are refused like the same values in the file, and the one-line
    message names the argument (on the command line, its option). A ``--trajectories`` below
    the file's batches lowers the batches.
    """
    out = dict(data)
    given = {k: v for k, v in (overrides or {}).items() if v is not None}
    if not given:
        return out
    emulation = out.get("emulation")
    emulation = dict(emulation) if isinstance(emulation, Mapping) else {}
    for key in ("seed", "shots"):
        if key in given:
            out[key] = given[key]
    for key in ("method", "trajectories"):
        if key in given:
            emulation[key] = given[key]
    if "trajectories" in given:
        _lower_batches(emulation)
    out["emulation"] = emulation
    _validate_overridden(out, source, given)
    return out


def _lower_batches(emulation: dict[str, Any]) -> None:
    """Fewer trajectories than the batches: as many batches as trajectories (before the
    model checks trajectories >= batches; unreadable counts are left to the model)."""
    try:
        n = whole_number(emulation["trajectories"])
        batches = whole_number(emulation.get("batches", DEFAULT_BATCHES))
    except ValueError:
        return
    if isinstance(n, int) and isinstance(batches, int) and 2 <= n < batches:
        emulation["batches"] = n


def _validate_overridden(data: Mapping[str, Any], source: str, given: Mapping[str, Any]) -> Any:
    try:
        return StudyFile.model_validate(dict(data))
    except ValidationError as exc:
        error = from_validation_error(exc, source, model=StudyFile)
        text = str(error)
        for key, name in OVERRIDE_ARGUMENTS.items():
            head = f"{source}: {key}: "
            if text.startswith(head) and name in given:
                value = quote(given[name])
                raise InputError(
                    f"{source}: {arg(name)} {value}: {text.removeprefix(head)}"
                ) from None
        raise error from None




def validate_sweep_options(
    source: str,
    *,
    points: Any = None,
    start: Any = None,
    stop: Any = None,
    coherence_gate_errors: Any = None,
) -> SweepDefaults:
    """Command-line sweep values through the file's own ``sweep:`` model (bounds included);
    a refused value is named by its argument (``points``; on the command line ``--points``)."""
    data = {
        "points": points,
        "start": start,
        "stop": stop,
        "coherence_gate_errors": coherence_gate_errors,
    }
    try:
        return SweepDefaults.model_validate(data)
    except ValidationError as exc:
        first = exc.errors(include_url=False)[0]
        key = str(first.get("loc", ("?",))[0])
        text = str(from_validation_error(exc, None))
        text = text.removeprefix(f"{key}: ")
        raise InputError(f"{source}: {arg(key)} {quote(data.get(key))}: {text}") from None


def load_study(path: str | Path, overrides: Mapping[str, Any] | None = None) -> Study:
    """Read, validate and resolve a study file (a path, or the name of a shipped study such as
    ``h2-stretched``); bad input raises a one-line InputError.

    ``overrides``: command-line values of ``seed``, ``shots``, ``method`` and ``trajectories``
    (see :func:`apply_overrides`), validated with the file."""
    src_path = Path(path)
    if not src_path.exists() and looks_like_name(str(path)):
        src_path = shipped_path("studies", str(path), str(path), "study")
    data = load_yaml_mapping(src_path, what="study file")
    return study_from_mapping(data, src_path, overrides)


def study_from_mapping(
    data: Mapping[str, Any], source: str | Path, overrides: Mapping[str, Any] | None = None
) -> Study:
    """Validate a study mapping; relative device paths are resolved against ``source``'s folder.

    The sizes of the heavy steps are checked against the memory before the recipes (see
    :mod:`noiselab.study.preflight`), so a study too large for this machine is refused early."""
    src_path = Path(source)
    src = str(src_path)
    data = apply_overrides(data, src, overrides)
    try:
        spec = StudyFile.model_validate(dict(data))
    except ValidationError as exc:
        raise from_validation_error(exc, src, model=StudyFile) from None

    if spec.drop_fixed_parity_qubits and spec.encoding != "parity":
        raise input_error(
            src,
            "drop_fixed_parity_qubits",
            f"needs encoding parity (the study has {spec.encoding})",
            "drop_fixed_parity_qubits: false, or encoding: parity",
        )
    ansatz = _study_ansatz(spec, src_path)

    # the device first: reading it is cheap, the molecule's check runs PySCF
    profile, device_source = _resolve_device(spec.device, src_path)
    molecule = _problem_source(spec, data, ansatz, src_path)
    num_qubits = logical_qubit_count(molecule, spec.encoding, spec.drop_fixed_parity_qubits)
    if isinstance(ansatz, CircuitAnsatz) and ansatz.num_qubits != num_qubits:
        raise input_error(
            src,
            "circuit.file",
            f"the circuit has {ansatz.num_qubits} qubits, the problem {num_qubits}",
            f"a circuit on {num_qubits} qubits (the Hamiltonian's)",
        )
    device_qubits = _device_qubits(profile)
    if num_qubits > len(device_qubits):
        raise input_error(
            src,
            "device",
            f"the problem needs {num_qubits} qubits but device {_profile_name(profile)!r} has "
            f"{len(device_qubits)}",
            f"a device with at least {num_qubits} qubits, a smaller active space, "
            "or drop_fixed_parity_qubits",
        )
    check_sizes(src, molecule, ansatz, num_qubits, spec.emulation)  # before any heavy step
    recipes = {
        name: validate_recipe(passes, src, f"recipes.{name}")
        for name, passes in spec.recipes.items()
    }
    layout = None
    if spec.layout is not None:
        missing = [q for q in spec.layout if q not in device_qubits]
        if missing:
            raise input_error(
                src,
                "layout",
                f"physical qubit(s) {missing} are not on device {_profile_name(profile)!r}",
                f"qubit ids {_id_range(device_qubits)}",
            )
        if len(spec.layout) != num_qubits:
            raise input_error(
                src,
                "layout",
                f"{len(spec.layout)} physical qubits given for a {num_qubits}-qubit problem",
                f"exactly {num_qubits} distinct qubit ids",
            )
        layout = tuple(spec.layout)
    if spec.tune is not None:
        check_tune_section(spec.tune, src)
    if spec.sweep is not None and spec.sweep.recipes is not None:
        for i, name in enumerate(spec.sweep.recipes):
            if name not in recipes:
                raise input_error(
                    src, f"sweep.recipes[{i}]", f"unknown recipe {name!r}", ", ".join(recipes)
                )
    if spec.rehearse is not None:
        _check_rehearse(spec.rehearse, src, recipes)
    return Study(
        name=spec.name,
        source=src_path,
        molecule=molecule,
        encoding=spec.encoding,
        drop_fixed_parity_qubits=spec.drop_fixed_parity_qubits,
        ansatz=ansatz,
        profile=profile,
        device_source=device_source,
        layout=layout,
        optimization_level=spec.compile.optimization_level,
        compile_seeds=spec.compile.seeds,
        compile_bias_spread=spec.compile.bias_spread,
        shots=spec.shots,
        target_mha=float(spec.target_mha),
        confidence=float(spec.confidence),
        recipes=recipes,
        seed=spec.seed,
        num_qubits=num_qubits,
        amplification_spread=float(spec.amplification_spread),
        amplification_offset=float(spec.amplification_offset),
        tune=spec.tune,
        sweep=spec.sweep,
        description=spec.description,
        emulation=spec.emulation,
        raw=dict(data),
        rehearse=spec.rehearse,
    )


def _check_rehearse(section: RehearseSettings, src: str, recipes: Mapping[str, Any]) -> None:
    """The rehearse section's recipe keys: a valid in-loop recipe, a known final recipe."""
    if section.loop_recipe is not None:
        validate_recipe(section.loop_recipe, src, "rehearse.loop_recipe")
    if section.final_recipe is not None and section.final_recipe not in recipes:
        raise input_error(
            src,
            "rehearse.final_recipe",
            f"unknown recipe {section.final_recipe!r}",
            ", ".join(recipes),
        )


def _study_ansatz(spec: StudyFile, study_path: Path) -> Any:
    """The trial circuit: exactly one of ansatz and circuit ({file: FILE})."""
    src = str(study_path)
    if (spec.ansatz is None) == (spec.circuit is None):
        problem = "required key is missing" if spec.ansatz is None else "both given"
        raise input_error(src, "ansatz", problem, "ansatz: {kind: ...} or circuit: {file: FILE}")
    if spec.ansatz is not None:
        return _validate_ansatz(spec.ansatz, src)
    try:
        section = CircuitSection.model_validate(spec.circuit)
    except ValidationError as exc:
        raise from_validation_error(exc, src, prefix="circuit") from None
    path = Path(section.file).expanduser()
    path = path if path.is_absolute() else study_path.parent / path
    circuit, sha = read_circuit_file(path, f"{src}: circuit.file: {path}")
    return CircuitAnsatz(
        **{**section.model_dump(), "file": str(path)},
        sha256=sha,
        num_qubits=circuit.num_qubits,
        num_parameters=circuit.num_parameters,
        operations=len(circuit.data),
    )


def _validate_ansatz(data: dict[str, Any], source: str) -> UccsdAnsatz | LayeredAnsatz:
    kind = data.get("kind")
    if kind not in ANSATZ_KINDS:
        problem = (
            "missing kind"
            if kind is None
            else f"unknown kind {quote(kind)}{did_you_mean(str(kind), list(ANSATZ_KINDS))}"
        )
        raise input_error(source, "ansatz.kind", problem, ", ".join(ANSATZ_KINDS))
    try:
        return ANSATZ_KINDS[kind].model_validate(data)  # type: ignore[return-value]
    except ValidationError as exc:
        raise from_validation_error(
            exc, source, prefix="ansatz", model=ANSATZ_KINDS[kind]
        ) from None


def logical_qubit_count(molecule: Any, encoding: str, drop_fixed_parity_qubits: bool) -> int:
    """Qubits of the encoded Hamiltonian: two per active spatial orbital, minus the two parity
    qubits that ``drop_fixed_parity_qubits`` drops (a qubit-operator file: its own count)."""
    return source_qubit_count(molecule, encoding, drop_fixed_parity_qubits)


PROBLEM_KEYS = ("molecule", "integrals", "hamiltonian")


def _problem_source(spec: StudyFile, data: Mapping[str, Any], ansatz: Any, study_path: Path) -> Any:
    """The study's problem source: exactly one of molecule, integrals, hamiltonian."""
    src = str(study_path)
    given = [k for k in PROBLEM_KEYS if getattr(spec, k) is not None]
    allowed = "one of molecule, integrals: {fcidump: FILE}, hamiltonian: {file: FILE}"
    if len(given) != 1:
        problem = "required key is missing" if not given else f"{' and '.join(given)} together"
        raise input_error(src, "molecule", problem, allowed)
    base = study_path.parent
    if spec.integrals is not None:
        return fcidump_source(spec.integrals, base, src)
    if spec.hamiltonian is not None:
        for key in ("encoding", "drop_fixed_parity_qubits"):
            if key in data:
                raise input_error(
                    src,
                    key,
                    "a qubit-operator file is already encoded",
                    "leave encoding keys out with hamiltonian: {file: FILE}",
                )
        if isinstance(ansatz, UccsdAnsatz):
            raise input_error(
                src,
                "ansatz.kind",
                "uccsd needs fermionic integrals, hamiltonian: {file: FILE} has none",
                "layered, or circuit: {file: FILE}",
            )
        return operator_source(spec.hamiltonian, base, src)
    mol = dict(spec.molecule or {})
    geometry = mol.get("geometry")
    if isinstance(geometry, dict):
        mol["geometry"] = read_xyz(_xyz_value(geometry, src), base, src)
    return molecule_from_mapping(mol, src, prefix="molecule")


def _xyz_value(geometry: Mapping[str, Any], src: str) -> Any:
    if set(geometry) != {"xyz"}:
        raise input_error(
            src,
            "molecule.geometry",
            f"keys {sorted(geometry)}",
            "an atom string, a list of [symbol, x, y, z], or {xyz: FILE}",
        )
    return geometry["xyz"]


def _resolve_device(value: str | dict[str, Any], study_path: Path) -> tuple[Any, str]:
    src = str(study_path)
    if isinstance(value, dict):
        # the profile layer writes "<source>: <key>: ..."; make its keys read device.<key>
        try:
            return profile_from_mapping(value, f"{src}: device"), "<inline>"
        except InputError as exc:
            head = f"{src}: device: "
            text = str(exc)
            if text.startswith(head) and not text.startswith(head + "(top level)"):
                text = f"{src}: device." + text.removeprefix(head)
            raise InputError(text) from None
    resolved = device_profile_path(value, study_path)
    return load_profile(resolved), str(resolved)


def device_profile_path(value: str, study_path: Path) -> Path:
    """The profile file a study's ``device:`` string names: a path relative to the study file,
    an absolute path, or a shipped profile's name. One-line InputError when there is none."""
    src = str(study_path)
    if not value.strip():
        raise input_error(src, "device", "empty profile path", "a path to a device profile file")
    p = Path(value).expanduser()
    resolved = Path(_normpath(p if p.is_absolute() else study_path.parent / p))
    if not resolved.exists() and looks_like_name(value):
        resolved = shipped_path("devices", value, src, "device")
    if not resolved.is_file():
        if resolved.is_dir():
            what = "is a folder"
        elif resolved.exists():
            what = "is not a regular file (a device, pipe or socket)"
        else:
            what = "not found (no such file)"
        raise input_error(
            src,
            "device",
            f"device profile {resolved} {what}",
            "a profile path relative to the study file, a shipped profile name "
            "(noiselab shipped), or an inline profile mapping",
        )
    return resolved


def _normpath(p: Path) -> str:
    return os.path.normpath(str(p))


def _device_qubits(profile: Any) -> list[int]:
    """Physical qubit ids of a profile: 0 .. qubit_count-1."""
    return list(range(int(profile.qubit_count)))


def _profile_name(profile: Any) -> str:
    return str(getattr(profile, "name", "device"))


def _id_range(ids: list[int]) -> str:
    ids = sorted(ids)
    if ids and ids == list(range(ids[0], ids[-1] + 1)):
        return f"{ids[0]}..{ids[-1]}"
    return ", ".join(map(str, ids))


def validate_recipe(
    passes: list[dict[str, Any]], source: str, key: str
) -> tuple[dict[str, Any], ...]:
    """Validate a recipe's passes with the mitigation registry; errors name ``key[i].option``.

    Returns the passes with every option filled in (the registry's defaults).
    """
    try:
        return tuple(parse_recipe(list(passes), where=key).spec())
    except InputError as exc:
        text = str(exc)
        # a check across options reads "key[i]: option: ..."; name it key[i].option
        text = re.sub(rf"^({re.escape(key)}\[\d+\]): ([a-z_]+): ", r"\1.\2: ", text)
        raise InputError(f"{source}: {text}") from None
