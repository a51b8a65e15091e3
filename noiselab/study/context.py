"""The experiment context of a study, computed once and reused by every job.

Steps: PySCF problem and exact energy -> qubit Hamiltonian -> trial circuit -> noiseless optimum
(cached in the results cache: it is the slow step for larger ansatzes) -> compiled, scheduled
circuit on the device (every transpiler seed of ``compile.seeds``; the one with the fewest
two-qubit gates, then the shortest schedule, is assessed) -> measurement plan -> mitigation's
``ExperimentContext``.
"""

from __future__ import annotations

import contextlib
import dataclasses
import time
from collections.abc import Callable, Iterable, Iterator, Mapping
from typing import Any

from noiselab.chem.ansatz import layered_circuit, uccsd_circuit
from noiselab.chem.circuit_file import read_circuit_file
from noiselab.chem.fermion import ENCODINGS
from noiselab.chem.optimize import OptimizationResult, optimize_noiseless, optimum_warnings
from noiselab.chem.sources import build_problem
from noiselab.chem.spin import exact_spin_squared
from noiselab.common.errors import InputError, ProblemTooLargeError, input_error
from noiselab.device.compile import compile_ensemble
from noiselab.device.profile import profile_warnings
from noiselab.mitigate.experiment import ExperimentContext
from noiselab.mitigate.plan import build_plan
from noiselab.mitigate.registry import make_pass
from noiselab.study.cache import ResultsCache, digest, pack_record, unpack_or_none
from noiselab.study.preflight import preflight, resolve_emulation, resolve_store
from noiselab.study.results import ContextSummary
from noiselab.study.spec import CircuitAnsatz, LayeredAnsatz, Study

OPTIMUM_KIND = "noiseless-optimum-v3"

ProgressHook = Callable[[str, int, int], None]


@dataclasses.dataclass(frozen=True)
class StudyContext:
    """Everything a job needs about a study before any noise is applied."""

    study: Study
    problem: Any  # noiselab.chem.molecule.ElectronicProblem (None: a qubit-operator file)
    qubit_problem: Any  # noiselab.chem.encode.QubitProblem
    ansatz_circuit: Any  # parameterized qiskit QuantumCircuit (logical qubits)
    optimum: Any  # noiselab.chem.optimize.OptimizationResult
    compiled: Any  # noiselab.device.compile.CompiledCircuit (bound at the optimum)
    plan: Any  # noiselab.mitigate.plan.MeasurementPlan
    experiment: Any  # noiselab.mitigate.experiment.ExperimentContext
    seconds: dict[str, float]
    #: "density_matrix" or "trajectory": what the emulator will use (the study's method resolved
    #: against the memory guard for this circuit width), and the one-line notice when "auto"
    #: switched to trajectories.
    emulation_method: str = "density_matrix"
    emulation_notice: str | None = None
    #: <S^2> of the exact sector ground state (noiselab.chem.spin), beside the exact energy
    exact_spin_squared: float | None = None
    #: one-line warnings about the noiseless optimum (noiselab.chem.optimize.optimum_warnings)
    warnings: tuple[str, ...] = ()
    #: every transpiler seed's compile (noiselab.device.compile.CompileEnsemble); ``compiled``
    #: is its chosen one
    ensemble: Any = None

    @property
    def exact_energy_ha(self) -> float:
        return float(self.qubit_problem.exact_energy_ha)

    @property
    def ansatz_energy_ha(self) -> float:
        return float(self.optimum.energy_ha)

    def summary(self) -> ContextSummary:
        s, qp, c = self.study, self.qubit_problem, self.compiled
        return ContextSummary(
            study=s.name,
            source=str(s.source),
            device=str(s.profile.name),
            device_source=s.device_source,
            qubits=int(qp.num_qubits),
            encoding=str(qp.encoding)
            + (" + fixed parity qubits dropped" if qp.drop_fixed_parity_qubits else ""),
            drop_fixed_parity_qubits=bool(qp.drop_fixed_parity_qubits),
            ansatz=s.ansatz.label(),
            n_parameters=int(self.ansatz_circuit.num_parameters),
            exact_energy_ha=float(qp.exact_energy_ha),
            hf_energy_ha=float(qp.hf_energy_ha),
            ansatz_energy_ha=float(self.optimum.energy_ha),
            patch=tuple(int(q) for q in c.patch),
            two_qubit_count=int(c.two_qubit_count),
            depth=int(c.depth),
            duration_ns=float(c.duration_ns),
            estimated_fidelity=(
                None if c.estimated_fidelity is None else float(c.estimated_fidelity)
            ),
            n_groups=int(self.plan.n_groups),
            exact_spin_squared=self.exact_spin_squared,
            ansatz_spin_squared=getattr(self.optimum, "spin_squared", None),
            optimizer_starts=int(getattr(self.optimum, "starts", 1)),
            optimizer_stopped=str(getattr(self.optimum, "stopped", "")),
            warnings=tuple(self.warnings),
            device_warnings=tuple(profile_warnings(self.study.profile)),
            **compile_fields(self.ensemble),
        )


def ansatz_circuit(study: Study, qubit_problem: Any) -> Any:
    """The study's parameterized trial circuit on the logical qubits."""
    a = study.ansatz
    if isinstance(a, CircuitAnsatz):
        circuit, sha = read_circuit_file(a.file, f"circuit.file: {a.file}")
        if sha != a.sha256:
            raise input_error(
                f"circuit.file: {a.file}",
                None,
                "the file changed after the study was read",
                "an unchanged file (run again)",
            )
        return circuit
    if isinstance(a, LayeredAnsatz):
        n = int(qubit_problem.num_qubits)
        return layered_circuit(
            n,
            a.layers,
            pairs=a.pair_list(n),
            entangler=a.entangler,
            initial_bitstring=list(qubit_problem.hf_bitstring),
        )
    return uccsd_circuit(qubit_problem, singles=a.singles, doubles=a.doubles)


def _optimum_key(study: Study) -> str:
    return digest(
        OPTIMUM_KIND,
        study.molecule.model_dump(mode="json"),
        study.encoding,
        study.drop_fixed_parity_qubits,
        study.ansatz.model_dump(mode="json"),  # start_seed included; the study's seed is not
    )


def optimize(study: Study, qubit_problem: Any, circuit: Any, cache: ResultsCache | None) -> Any:
    """Noiseless optimum of the trial circuit (read from / written to the cache)."""
    key = _optimum_key(study)
    if cache is not None:
        hit = cache.get(OPTIMUM_KIND, key)
        if hit is not None:
            result = unpack_or_none(OptimizationResult, hit[0])
            if result is not None and len(result.parameters) == circuit.num_parameters:
                return result
            cache.discard(OPTIMUM_KIND, key)  # damaged: recomputed and stored again
    result = optimize_noiseless(
        qubit_problem,
        circuit,
        starts=study.ansatz.starts,
        seed=study.ansatz.start_seed,
        max_iterations=study.ansatz.max_iterations,
        max_starts=study.ansatz.max_starts,
    )
    if cache is not None:
        cache.put(OPTIMUM_KIND, key, pack_record(result), result.seconds)
    return result


def recipes_verify(recipes: Iterable[Iterable[Mapping[str, Any]]]) -> bool:
    """Whether any of these recipes (lists of pass entries) runs symmetry verification."""
    for passes in recipes:
        for entry in passes:
            if entry.get("pass") == "postselect" and make_pass(entry).spec()["mode"] == "verify":
                return True
    return False


@contextlib.contextmanager
def naming_source(source: object) -> Iterator[None]:
    """Re-raise a one-line InputError that does not name its file with ``source`` in front
    (chem, device and mitigation refusals know the key, not the study file)."""
    try:
        yield
    except InputError as exc:
        head = str(source)
        if str(exc).startswith(head):
            raise
        raise type(exc)(f"{head}: {exc}") from None


def build_context(
    study: Study,
    *,
    cache: ResultsCache | None = None,
    progress: ProgressHook | None = None,
    verification: bool | None = None,
    optimum: OptimizationResult | None = None,
) -> StudyContext:
    """Compute the study's problem, optimum, compiled circuit, plan and mitigation context.

    Every refusal names the study file (see :func:`_build_context`)."""
    with naming_source(study.source):
        return _build_context(
            study, cache=cache, progress=progress, verification=verification, optimum=optimum
        )


def _build_context(
    study: Study,
    *,
    cache: ResultsCache | None = None,
    progress: ProgressHook | None = None,
    verification: bool | None = None,
    optimum: OptimizationResult | None = None,
) -> StudyContext:
    """Compute the study's problem, optimum, compiled circuit, plan and mitigation context.

    ``verification``: measure the extra bases symmetry verification needs; None: exactly when
    a recipe of the study verifies (jobs that run other recipes, like tune, say so, or call
    :func:`with_verification` on a context they were given). ``optimum``: a noiseless optimum
    computed elsewhere for this study's circuit (the scan's warm-started one); None: optimize.
    With ``verification`` None the job runs the study's recipes, so a trajectory run may keep
    per-batch values for them (:func:`noiselab.study.preflight.resolve_store`); a job with
    recipes of its own keeps per-batch distributions.
    """
    preflight(study)  # every heavy step's size, before the first of them
    job_recipes = None
    if verification is None:
        verification = recipes_verify(study.recipes.values())
        job_recipes = study.recipes

    steps = ("exact energy (PySCF)", "noiseless optimum", "compile to device")
    seconds: dict[str, float] = {}

    def tick(i: int) -> None:
        if progress is not None:
            progress("preparing the study", i, len(steps))

    tick(0)
    t = time.perf_counter()
    problem, qp = build_problem(study.molecule, study.encoding, study.drop_fixed_parity_qubits)
    if qp.num_qubits != study.num_qubits:  # the study counted spin orbitals before PySCF ran
        raise input_error(
            str(study.source),
            "molecule",
            f"encodes to {qp.num_qubits} qubits, not {study.num_qubits}",
        )
    seconds["problem"] = time.perf_counter() - t
    tick(1)
    t = time.perf_counter()
    circuit = ansatz_circuit(study, qp)
    if optimum is None:
        refuse_store_early(study, qp, circuit, job_recipes, verification)
        optimum = optimize(study, qp, circuit, cache)
    exact_s2, warnings = optimum_checks(study, qp, optimum)
    seconds["optimize"] = time.perf_counter() - t
    tick(2)
    t = time.perf_counter()
    bound = circuit.assign_parameters(list(optimum.parameters), inplace=False)
    try:
        ensemble = compile_ensemble(
            bound,
            study.profile,
            layout=study.layout,
            optimization_level=study.optimization_level,
            seeds=study.transpiler_seeds,
        )
    except InputError as exc:
        text = str(exc)
        if study.layout is not None and "layout: " in text:  # the study's key, not the profile's
            raise InputError(f"{study.source}: layout: {text.split('layout: ', 1)[1]}") from None
        raise
    compiled = ensemble.chosen
    # Pauli propagation reads terms, never the 2**n weight vectors (built lazily if asked)
    # (and ~1500 groups at 20 qubits: sorted insertion, not the ~40 s colouring)
    pauli = study.emulation.method == "pauli_propagation"
    plan = build_plan(
        qp.hamiltonian, dense=not pauli, grouping="sorted_insertion" if pauli else "coloring"
    )
    seconds["compile"] = time.perf_counter() - t
    tick(3)
    experiment = make_experiment(study, qp, compiled, plan, optimum, verification)
    method, notice, values = resolve_store(
        study, int(compiled.circuit.num_qubits), experiment, job_recipes
    )
    if values:
        experiment = replace_experiment(experiment, trajectory_values=True)
    return StudyContext(
        study=study,
        problem=problem,
        qubit_problem=qp,
        ansatz_circuit=circuit,
        optimum=optimum,
        compiled=compiled,
        plan=plan,
        experiment=experiment,
        seconds=seconds,
        emulation_method=method,
        emulation_notice=notice,
        exact_spin_squared=exact_s2,
        warnings=warnings,
        ensemble=ensemble,
    )


def compile_fields(ensemble: Any) -> dict[str, Any]:
    """ContextSummary's compile-ensemble fields (empty without an ensemble)."""
    if ensemble is None:
        return {}
    return {
        "compile_seeds": tuple(ensemble.seeds),
        "compile_two_qubit_gates": tuple(int(c.two_qubit_count) for c in ensemble.compiles),
        "compile_durations_ns": tuple(float(c.duration_ns) for c in ensemble.compiles),
        "chosen_seed": int(ensemble.chosen_seed),
        "distinct_compiles": len(ensemble.distinct),
    }


def replace_experiment(experiment: Any, **changes: Any) -> Any:
    """``dataclasses.replace`` of an ExperimentContext that keeps its computed
    ``measured_bases`` when neither the plan, the problem nor ``verification_bases`` change
    (the verification bases take a noticeable time to derive; a new compile or profile does
    not change them), and its realized circuit transforms when neither ``compiled`` nor
    ``profile`` change."""
    out = dataclasses.replace(experiment, **changes)
    known = experiment.__dict__.get("measured_bases")
    if known is not None and not {"plan", "problem", "verification_bases"} & changes.keys():
        out.__dict__["measured_bases"] = known
    masks = experiment.__dict__.get("_value_masks")  # batch_spec.value_masks: bases and problem
    if masks is not None and not {"plan", "problem", "verification_bases"} & changes.keys():
        out.__dict__["_value_masks"] = masks
    realizer = experiment.__dict__.get("realizer")  # realized transforms: circuit and profile
    if realizer is not None and not {"compiled", "profile"} & changes.keys():
        out.__dict__["realizer"] = realizer
    return out


def optimum_checks(study: Study, qp: Any, optimum: Any) -> tuple[float | None, tuple[str, ...]]:
    """(exact ground state's <S^2>, warnings about the noiseless optimum against the target).

    The exact S^2 needs the sector ground state; past the exact-diagonalization limit it is
    None and the spin check is skipped.
    """
    s2: float | None = None
    if qp.encoding in ENCODINGS:  # a qubit-operator file has no spin operator
        with contextlib.suppress(ProblemTooLargeError):
            s2 = exact_spin_squared(qp)
    return s2, optimum_warnings(optimum, qp, float(study.target_mha), s2)


def with_verification(ctx: StudyContext, needed: bool) -> StudyContext:
    """``ctx``, or a copy whose experiment also measures the verification bases when
    ``needed`` and ``ctx`` lacks them (a context that has them is kept: extra bases are
    harmless, and its simulations may already be cached)."""
    if not needed or ctx.experiment.verification_bases:
        return ctx
    experiment = replace_experiment(ctx.experiment, verification_bases=True)
    method, notice, values = resolve_store(
        ctx.study,
        int(ctx.compiled.circuit.num_qubits),
        experiment,
        ctx.study.recipes if experiment.trajectory_values else None,
    )
    experiment = replace_experiment(experiment, trajectory_values=values)
    return dataclasses.replace(
        ctx, experiment=experiment, emulation_method=method, emulation_notice=notice
    )


def refuse_store_early(
    study: Study,
    qp: Any,
    circuit: Any,
    recipes: Mapping[str, Any] | None,
    verification: bool,
) -> None:
    """Refuse, before the noiseless optimizer runs (minutes at 16 qubits), a study whose
    trajectory store cannot fit: when even the logical width leaves the density matrix, the
    circuit at zero angles is compiled once and :func:`resolve_store` judges it as it will
    judge the optimized one (same patch, bases and recipes; the angles change neither)."""
    method, _ = resolve_emulation(study, int(qp.num_qubits))
    if method != "trajectory":
        return
    zero = circuit.assign_parameters([0.0] * circuit.num_parameters, inplace=False)
    compiled = compile_ensemble(
        zero,
        study.profile,
        layout=study.layout,
        optimization_level=study.optimization_level,
        seeds=study.transpiler_seeds[:1],
    ).chosen
    plan = build_plan(qp.hamiltonian, dense=False)
    unknown = dataclasses.make_dataclass("_NoOptimum", [("energy_ha", float)])(float("nan"))
    experiment = make_experiment(study, qp, compiled, plan, unknown, verification)
    resolve_store(study, int(compiled.circuit.num_qubits), experiment, recipes)


def make_experiment(
    study: Study, qp: Any, compiled: Any, plan: Any, optimum: Any, verification: bool = True
) -> Any:
    """Mitigation's ExperimentContext for this study (budget, target, seed included);
    ``verification``: whether it measures the symmetry-verification bases."""
    return ExperimentContext(
        problem=qp,
        compiled=compiled,
        profile=study.profile,
        plan=plan,
        exact_energy_ha=float(qp.exact_energy_ha),
        ansatz_energy_ha=float(optimum.energy_ha),
        shots=int(study.shots),
        target_mha=float(study.target_mha),
        confidence=float(study.confidence),
        seed=int(study.seed),
        emulation_method=study.emulation.method,
        num_trajectories=int(study.emulation.trajectories),
        num_batches=int(study.emulation.batches),
        max_density_matrix_qubits=study.emulation.max_density_matrix_qubits,
        verification_bases=bool(verification),
        amplification_spread=float(study.amplification_spread),
        amplification_offset=float(study.amplification_offset),
    )
