"""What a study will do, from the file alone: ``noiselab study check``.

``describe_study(study)`` lists the resolved study (molecule, qubits, encoding, device and patch,
recipes, budget) and an estimate of the work: the distinct circuit variants the recipes need, the
simulations they cost and the peak memory of the heavy steps (the same counting estimates as
:mod:`noiselab.study.preflight`), and a rough run time scaled from the shipped demo's measured
time. Nothing is simulated, compiled or optimized.
"""

from __future__ import annotations

from dataclasses import dataclass
from types import SimpleNamespace
from typing import Any

from noiselab.chem.molecule import MoleculeSpec, molecule_sizes
from noiselab.common.memory import format_bytes, memory_budget
from noiselab.device.compile import select_patch
from noiselab.emulate.memory import estimate_memory_bytes
from noiselab.mitigate.recipe import parse_recipe
from noiselab.study.preflight import emulation_method, estimate_steps
from noiselab.study.spec import Study

#: Seconds of one 4-qubit density-matrix simulation with its readout and bases (the shipped
#: demo: about 3 s of work for 16 simulations, README); a density matrix costs about 4 x more
#: per extra qubit (4**q entries). A rough scale for planning, not a measurement of this machine.
DEMO_SECONDS_PER_SIMULATION = 0.2
DEMO_QUBITS = 4


@dataclass(frozen=True)
class StudyOutline:
    """The resolved study as lines of text, and the work estimate in numbers."""

    lines: tuple[str, ...]
    variants: int
    spread_simulations: int
    peak_bytes: int
    seconds: float


def _formula(atoms: tuple[Any, ...]) -> str:
    counts: dict[str, int] = {}
    for atom in atoms:
        counts[atom[0]] = counts.get(atom[0], 0) + 1
    return "".join(f"{s}{n if n > 1 else ''}" for s, n in counts.items())


def _pass_words(spec: dict[str, Any]) -> str:
    options = ", ".join(f"{k} {v}" for k, v in spec.items() if k != "pass" and v is not None)
    return f"{spec['pass']} ({options})" if options else str(spec["pass"])


def describe_study(study: Study) -> StudyOutline:
    """The study as the jobs will read it, and what running ``assess`` on it would cost."""
    m = study.molecule
    if isinstance(m, MoleculeSpec):
        sizes = molecule_sizes(m)
        active = (
            "every orbital"
            if m.active_space is None
            else f"{m.active_space.electrons} electrons in {m.active_space.orbitals} orbitals"
        )
        problem = (
            f"molecule: {_formula(m.geometry)}, basis {m.basis}, charge {m.charge}, spin "
            f"{m.spin}, active space: {active} ({sizes.n_basis} basis functions, "
            f"{sizes.n_determinants} determinants)"
        )
    else:  # integrals or a qubit Hamiltonian read from a file
        problem = f"problem: read from a file ({type(m).__name__})"
    profile = study.profile
    chosen = select_patch(profile, study.num_qubits, study.layout)
    patch = (
        f"{list(chosen)} (the study's layout)"
        if study.layout is not None
        else f"{list(chosen)} (the cheapest connected patch, as assess picks it)"
    )
    ctx = SimpleNamespace(amplification_offset=study.amplification_offset)
    variants: set[Any] = set()
    unknown: list[str] = []
    recipe_lines = []
    for name, passes in study.recipes.items():
        parsed = parse_recipe(list(passes), where=f"recipes.{name}")
        words = "; ".join(_pass_words(p) for p in passes) or "no mitigation"
        try:
            own = parsed.variants(ctx)  # type: ignore[arg-type]
        except Exception:  # a pass whose circuits depend on the compiled circuit (training sets)
            unknown.append(name)
            recipe_lines.append(f"    {name}: {words} (circuit variants known once compiled)")
            continue
        variants.update(own)
        recipe_lines.append(f"    {name}: {words} ({len(own)} circuit variant(s))")
    q = study.num_qubits
    method, _ = emulation_method(str(study.source), study.emulation, q, 1)
    e = study.emulation
    emulation_bytes = estimate_memory_bytes(
        q,
        method,
        trajectories_per_batch=max(1, e.trajectories // e.batches),
        num_batches=e.batches,
    )
    steps = estimate_steps(m, study.ansatz, q) if isinstance(m, MoleculeSpec) else ()
    peak = max([emulation_bytes, *(s.bytes for s in steps)])
    n_var = len(variants)
    spread = n_var * (study.compile_seeds - 1) if study.compile_bias_spread else 0
    per_sim = DEMO_SECONDS_PER_SIMULATION * 4.0 ** max(0, q - DEMO_QUBITS)
    seconds = (n_var + spread) * per_sim
    budget = memory_budget()
    lines = (
        f"study {study.name} ({study.source})",
        problem,
        f"qubits: {q} ({study.encoding}"
        + (", fixed parity qubits dropped" if study.drop_fixed_parity_qubits else "")
        + f"), ansatz {_label(study.ansatz)}",
        f"device: {profile.name} ({study.device_source}), {profile.qubit_count} qubits, "
        f"natives {', '.join(profile.native_gate_names)}; patch: {patch}",
        f"compile: optimization level {study.optimization_level}, transpiler seeds "
        f"{study.compile_seeds}, bias spread over compiles "
        f"{'on' if study.compile_bias_spread else 'off'}",
        f"budget: {study.shots:,} shots per estimate, target {study.target_mha:.4g} mHa at "
        f"confidence {study.confidence:g}, seed {study.seed}",
        f"recipes ({len(study.recipes)}):",
        *recipe_lines,
        f"emulation: {method} (emulation.method {e.method})",
        f"work: {'at least ' if unknown else ''}{n_var} distinct simulation(s) of {q} qubits for "
        "the assessed compile"
        + (f" (more for {', '.join(unknown)}, counted once compiled)" if unknown else "")
        + (
            f", up to {spread} more for the bias spread (one per other distinct compile)"
            if spread
            else ""
        )
        + (
            "; distillation runs two copies (twice the qubits): its time and memory are above "
            "this estimate"
            if any(p.get("pass") == "distillation" for ps in study.recipes.values() for p in ps)
            else ""
        ),
        f"memory: peak about {format_bytes(peak)} (the largest of: "
        + ", ".join(
            [f"emulation {format_bytes(emulation_bytes)}"]
            + [f"{s.step} {format_bytes(s.bytes)}" for s in steps]
        )
        + f"); {budget.describe()}",
        f"time: roughly {_duration(seconds)} for assess (scaled from the demo's measured "
        f"{DEMO_SECONDS_PER_SIMULATION:g} s per {DEMO_QUBITS}-qubit simulation, 4x per extra "
        "qubit; the noiseless optimizer and compiling come on top)",
    )
    return StudyOutline(lines, n_var, spread, peak, seconds)


def _label(ansatz: Any) -> str:
    label = getattr(ansatz, "label", None)
    return str(label()) if callable(label) else type(ansatz).__name__


def _duration(seconds: float) -> str:
    if seconds < 60:
        return f"{max(seconds, 1.0):.0f} s"
    if seconds < 3600:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"
