"""Compile a logical circuit to a device: choose a patch, transpile to natives, schedule (ALAP).

The compiled circuit has width k = len(patch) (circuit qubit i is physical ``patch[i]``), only
native gates, ``delay`` instructions on idle qubits (durations in seconds) and no measurements.
Parameterized circuits are transpiled once and bound many times (:meth:`CompiledCircuit.bind`).

``estimated_fidelity`` is a quick figure of merit, not a simulation: the product over gates of
(1 - average infidelity of the gate's full error channel, coherent terms included) times, for
every delay of duration t on a qubit, (1 - r_idle(t)) with r_idle the average infidelity of
thermal relaxation over t. It ignores readout and how errors propagate.
``estimate_error_budget`` sums the same infidelities per kind of operation (the realized noise
scale of a folded circuit is the ratio of its total to the unfolded one's).

Over 400 lines: patch selection, the restricted Target, transpilation, ALAP scheduling and the
error-budget estimate read the same profile durations and errors; the compile ensemble
chooses among their outputs.
"""

from __future__ import annotations

import dataclasses
import hashlib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from qiskit import QuantumCircuit, transpile
from qiskit.circuit import Delay, Measure, Parameter
from qiskit.circuit.library import CXGate, CZGate, ECRGate, RZGate, SXGate, XGate
from qiskit.transpiler import InstructionProperties, Target
from qiskit.transpiler.exceptions import TranspilerError

from noiselab.common.errors import InputError, input_error
from noiselab.device import thermal
from noiselab.device.noise import delay_seconds, gate_infidelity
from noiselab.device.profile import FRAME_GATES, VIRTUAL_GATES, DeviceProfile, check_patch

_STRUCTURAL = frozenset({"delay", "barrier"})


@dataclass(frozen=True)
class CompiledCircuit:
    """A circuit compiled and scheduled for a patch of a device (durations in ns)."""

    circuit: Any  # qiskit QuantumCircuit, width len(patch), no measurements
    patch: tuple[int, ...]
    logical_to_circuit: tuple[int, ...]
    two_qubit_count: int
    depth: int  # gate depth, delays and barriers not counted
    duration_ns: float
    estimated_fidelity: float
    num_qubits: int
    device_name: str = ""
    source_parameters: tuple[Any, ...] = ()  # the input circuit's parameters, in its order

    @property
    def parameters(self) -> tuple[Any, ...]:
        """Parameters to bind: those of the input circuit (qiskit's sorted order), so a value
        vector for the logical circuit binds here too, even if transpiling dropped one."""
        if self.source_parameters:
            return self.source_parameters
        return tuple(self.circuit.parameters)

    @property
    def num_logical_qubits(self) -> int:
        return len(self.logical_to_circuit)

    def bind(self, values: Mapping[Any, float] | Sequence[float]) -> CompiledCircuit:
        """Assign parameter values (a mapping, or a sequence in :attr:`parameters` order)."""
        params = self.parameters
        if not isinstance(values, Mapping):
            values = list(values)
            if len(values) != len(params):
                raise input_error(
                    None,
                    "parameters",
                    f"{len(values)} values for {len(params)} parameters",
                    f"{len(params)} values",
                )
            values = dict(zip(params, values, strict=True))
        present = set(self.circuit.parameters)
        bound = self.circuit.assign_parameters(
            {p: v for p, v in values.items() if p in present}, inplace=False
        )
        return dataclasses.replace(self, circuit=bound, source_parameters=())


def build_target(profile: DeviceProfile, patch: Sequence[int]) -> Any:
    """qiskit ``Target`` on circuit qubits 0..k-1 (physical ``patch``): natives with durations
    (seconds) and errors (average infidelity of the full channel), Delay and Measure."""
    patch = check_patch(profile, patch)
    k = len(patch)
    target = Target(num_qubits=k, description=f"{profile.name} patch {list(patch)}")
    one = {"rz": RZGate(Parameter("theta")), "sx": SXGate(), "x": XGate()}
    for gate in profile.single_qubit_gates:
        props = {}
        for i, q in enumerate(patch):
            dur_s = profile.gate_duration_ns(gate) * 1e-9
            props[(i,)] = InstructionProperties(
                duration=dur_s, error=gate_infidelity(profile, gate, (q,))
            )
        target.add_instruction(one[gate], props)
    g2 = profile.two_qubit_gate
    two = {"cz": CZGate(), "cx": CXGate(), "ecr": ECRGate()}[g2]
    props2 = {}
    for i, qi in enumerate(patch):
        for j, qj in enumerate(patch):
            if i != j and profile.has_pair(qi, qj):
                props2[(i, j)] = InstructionProperties(
                    duration=profile.durations.two_qubit_ns * 1e-9,
                    error=gate_infidelity(profile, g2, (qi, qj)),
                )
    if props2:
        target.add_instruction(two, props2)
    target.add_instruction(Delay(Parameter("t")), {(i,): None for i in range(k)})
    meas = {}
    for i, q in enumerate(patch):
        qp = profile.qubit(q)
        meas[(i,)] = InstructionProperties(
            duration=profile.durations.readout_ns * 1e-9,
            error=0.5 * (qp.flip_0to1 + qp.flip_1to0),
        )
    target.add_instruction(Measure(), meas)
    return target


def _connected(profile: DeviceProfile, qubits: Sequence[int]) -> bool:
    qs = set(qubits)
    if not qs:
        return False
    start = next(iter(qs))
    seen, stack = {start}, [start]
    while stack:
        q = stack.pop()
        for nb in profile.neighbours(q):
            if nb in qs and nb not in seen:
                seen.add(nb)
                stack.append(nb)
    return seen == qs


def _qubit_cost(profile: DeviceProfile, q: int) -> float:
    qp = profile.qubit(q)
    idle = thermal.relaxation_infidelity(profile.durations.two_qubit_ns, [(qp.t1_us, qp.t2_us)])
    return qp.gate_error + 0.5 * (qp.flip_0to1 + qp.flip_1to0) + idle


def select_patch(
    profile: DeviceProfile, n: int, layout: Sequence[int] | None = None
) -> tuple[int, ...]:
    """Physical qubits for an n-qubit circuit.

    With ``layout``: validated (length n, existing, distinct, connected) and returned in order
    (logical qubit i starts on ``layout[i]``). Without: a connected set grown greedily from every
    seed qubit, adding the neighbour with the lowest (link error + qubit cost); the cheapest
    set is returned sorted. Qubit cost = 1q error + mean readout error + idle error over one
    two-qubit gate time.
    """
    if n < 1:
        raise input_error(profile.source, "circuit", "has no qubits", "at least 1 qubit")
    if n > profile.qubit_count:
        raise input_error(
            profile.source,
            "circuit",
            f"needs {n} qubits but device '{profile.name}' has {profile.qubit_count}",
            f"at most {profile.qubit_count} qubits",
        )
    if layout is not None:
        patch = check_patch(profile, layout, what="layout")
        if len(patch) != n:
            raise input_error(
                profile.source,
                "layout",
                f"{len(patch)} qubits for a {n}-qubit circuit",
                f"exactly {n}",
            )
        if n > 1 and not _connected(profile, patch):
            raise input_error(
                profile.source,
                "layout",
                f"qubits {list(patch)} are not connected on '{profile.name}'",
                "a connected set",
            )
        return patch
    qcost = {q: _qubit_cost(profile, q) for q in range(profile.qubit_count)}
    best: tuple[float, tuple[int, ...]] | None = None
    for seed in range(profile.qubit_count):
        chosen = [seed]
        cost = qcost[seed]
        while len(chosen) < n:
            options = []
            for q in chosen:
                for nb in profile.neighbours(q):
                    if nb not in chosen:
                        options.append((profile.pair_error(q, nb) + qcost[nb], nb))
            if not options:
                break
            c, nb = min(options)
            chosen.append(nb)
            cost += c
        if len(chosen) == n and (best is None or cost < best[0] - 1e-15):
            best = (cost, tuple(sorted(chosen)))
    if best is None:
        raise input_error(
            profile.source,
            "links",
            f"no connected set of {n} qubits on '{profile.name}'",
            "a connected device",
        )
    return best[1]


def _op_duration_ns(profile: DeviceProfile, op: Any) -> float:
    if op.name == "delay":
        return delay_seconds(op) * 1e9
    if op.name == "barrier":
        return 0.0
    return profile.gate_duration_ns(op.name)


def circuit_duration_ns(circuit: Any, profile: DeviceProfile) -> float:
    """Duration of a compiled circuit from the profile's durations (ns)."""
    clock = [0.0] * circuit.num_qubits
    for inst in circuit.data:
        idx = [circuit.find_bit(q).index for q in inst.qubits]
        if not idx:
            continue
        start = max(clock[i] for i in idx)
        end = start + _op_duration_ns(profile, inst.operation)
        for i in idx:
            clock[i] = end
    return max(clock) if clock else 0.0


def operation_errors(
    circuit: Any, profile: DeviceProfile, patch: Sequence[int]
) -> list[tuple[str, float]]:
    """(kind, average infidelity) of every noisy operation: kind "two_qubit" or "single_qubit"
    for gates (the full error channel, coherent terms included), "idle" for thermal relaxation
    over a delay; virtual gates and barriers are left out."""
    cache: dict[tuple[str, tuple[int, ...]], float] = {}
    out: list[tuple[str, float]] = []
    for inst in circuit.data:
        name = inst.operation.name
        idx = tuple(circuit.find_bit(q).index for q in inst.qubits)
        phys = tuple(patch[i] for i in idx)
        if name == "barrier" or name in VIRTUAL_GATES or name in FRAME_GATES:
            continue
        if name == "delay":
            qp = profile.qubit(phys[0])
            t_ns = delay_seconds(inst.operation) * 1e9
            out.append(("idle", thermal.relaxation_infidelity(t_ns, [(qp.t1_us, qp.t2_us)])))
            continue
        key = (name, phys)
        if key not in cache:
            cache[key] = gate_infidelity(profile, name, phys)
        out.append(("two_qubit" if len(phys) == 2 else "single_qubit", cache[key]))
    return out


def estimate_fidelity(circuit: Any, profile: DeviceProfile, patch: Sequence[int]) -> float:
    """Product of (1 - gate infidelity) and idle relaxation factors (see module docstring)."""
    fid = 1.0
    for _, r in operation_errors(circuit, profile, patch):
        fid *= 1.0 - r
    return min(1.0, max(0.0, fid))


ERROR_KINDS = ("two_qubit", "single_qubit", "idle")


def estimate_error_budget(
    circuit: Any, profile: DeviceProfile, patch: Sequence[int]
) -> dict[str, float]:
    """Estimated error of a compiled circuit per kind of operation ("two_qubit",
    "single_qubit", "idle"): the sum of the operations' average infidelities. Additive (first
    order in the error rates), so it grows by s when every rate grows by s; the ratio of two
    circuits' totals is the noise scale one realizes relative to the other."""
    budget = dict.fromkeys(ERROR_KINDS, 0.0)
    for kind, r in operation_errors(circuit, profile, patch):
        budget[kind] += r
    return budget


def _prepare(circuit: Any) -> Any:
    """Drop final measurements; refuse anything the emulator cannot take."""
    if not isinstance(circuit, QuantumCircuit):
        raise InputError(f"circuit: expected a qiskit QuantumCircuit, got {type(circuit).__name__}")
    out = circuit.remove_final_measurements(inplace=False) if circuit.num_clbits else circuit
    for inst in out.data:
        if inst.operation.name == "measure":
            raise InputError(
                "circuit: contains a mid-circuit measurement; allowed: unitary gates only"
            )
        if getattr(inst.operation, "condition", None) is not None or inst.clbits:
            raise InputError(
                f"circuit: instruction {inst.operation.name!r} uses classical bits; "
                "allowed: unitary gates only"
            )
    return out


def synthesize_abstract(circuit: Any) -> Any:
    """Synthesize high-level gates (Pauli exponentials) to cx + single-qubit gates, unrouted.

    Measured on UCCSD circuits (H2, LiH active space): synthesizing before routing, then routing
    and optimizing for the device, gives 15-60 % fewer two-qubit gates than letting the
    target-aware synthesis expand the Pauli exponentials (H2 in Jordan-Wigner: 19 instead of 48
    CZ on an all-to-all device, 39 instead of 48 on a line).
    """
    return transpile(
        circuit, basis_gates=["cx", "rz", "sx", "x"], optimization_level=2, seed_transpiler=0
    )


def compile_to_device(
    circuit: Any,
    profile: DeviceProfile,
    layout: Sequence[int] | None = None,
    optimization_level: int = 2,
    seed: int = 1234,
) -> CompiledCircuit:
    """Transpile ``circuit`` to the natives of a patch of ``profile`` and schedule it (ALAP).

    ``layout``: physical qubit for each logical qubit (default: :func:`select_patch` picks a
    connected low-error patch and the transpiler places the qubits on it). At optimization
    level 1 and above, Pauli exponentials are synthesized before routing
    (:func:`synthesize_abstract`); level 0 transpiles the circuit as given.
    """
    return compile_ensemble(circuit, profile, layout, optimization_level, (seed,)).chosen


@dataclass(frozen=True)
class CompileEnsemble:
    """One circuit compiled with several transpiler seeds, and the compile an experimenter
    would run: fewest two-qubit gates, then shortest schedule, then the earliest seed."""

    seeds: tuple[int, ...]
    compiles: tuple[CompiledCircuit, ...]  # one per seed
    chosen_index: int
    #: index of the first compile of each distinct compiled circuit (seed order)
    distinct: tuple[int, ...]

    @property
    def chosen(self) -> CompiledCircuit:
        return self.compiles[self.chosen_index]

    @property
    def chosen_seed(self) -> int:
        return self.seeds[self.chosen_index]

    @property
    def alternatives(self) -> tuple[CompiledCircuit, ...]:
        """The distinct compiles other than the chosen one's circuit."""
        mine = circuit_fingerprint(self.chosen)
        return tuple(
            self.compiles[i] for i in self.distinct if circuit_fingerprint(self.compiles[i]) != mine
        )


def circuit_fingerprint(compiled: CompiledCircuit) -> str:
    """Digest of a compiled circuit's instructions (names, qubits, parameters to 12 digits) and
    of its logical-to-circuit map: equal for compiles that run the same experiment."""
    h = hashlib.sha256(repr(compiled.logical_to_circuit).encode())
    circuit = compiled.circuit
    for inst in circuit.data:
        qubits = tuple(circuit.find_bit(q).index for q in inst.qubits)
        params = tuple(
            f"{float(p):.12g}" if isinstance(p, int | float) else str(p)
            for p in inst.operation.params
        )
        h.update(repr((inst.operation.name, qubits, params)).encode())
    return h.hexdigest()


def choose_compile(compiles: Sequence[CompiledCircuit]) -> int:
    """Index of the compile an experimenter would pick: fewest two-qubit gates, then shortest
    schedule (to 1e-6 ns), then the first."""
    return min(
        range(len(compiles)),
        key=lambda i: (compiles[i].two_qubit_count, round(compiles[i].duration_ns, 6), i),
    )


def compile_ensemble(
    circuit: Any,
    profile: DeviceProfile,
    layout: Sequence[int] | None = None,
    optimization_level: int = 2,
    seeds: Sequence[int] = tuple(range(8)),
) -> CompileEnsemble:
    """:func:`compile_to_device` with each transpiler seed (patch selection and the abstract
    synthesis are shared), the chosen compile (:func:`choose_compile`) and the distinct ones."""
    if optimization_level not in (0, 1, 2, 3):
        raise input_error(
            None, "optimization_level", f"{optimization_level!r} is not allowed", "0, 1, 2 or 3"
        )
    seeds = tuple(int(s) for s in seeds)
    if not seeds:
        raise input_error(None, "compile.seeds", "no seed", "at least one transpiler seed")
    circ = _prepare(circuit)
    patch = select_patch(profile, circ.num_qubits, layout)
    target = build_target(profile, patch)
    source = synthesize_abstract(circ) if optimization_level >= 1 else circ
    compiles = tuple(
        _transpile_one(
            source, circ, profile, patch, target, layout is not None, optimization_level, seed
        )
        for seed in seeds
    )
    first: dict[str, int] = {}
    for i, c in enumerate(compiles):
        first.setdefault(circuit_fingerprint(c), i)
    return CompileEnsemble(
        seeds=seeds,
        compiles=compiles,
        chosen_index=choose_compile(compiles),
        distinct=tuple(sorted(first.values())),
    )


def _transpile_one(
    source: Any,
    circ: Any,
    profile: DeviceProfile,
    patch: tuple[int, ...],
    target: Any,
    fixed_layout: bool,
    optimization_level: int,
    seed: int,
) -> CompiledCircuit:
    n = circ.num_qubits
    try:
        out = transpile(
            source,
            target=target,
            initial_layout=list(range(n)) if fixed_layout else None,
            optimization_level=optimization_level,
            seed_transpiler=seed,
            scheduling_method="alap",
        )
    except TranspilerError as exc:
        msg = " ".join(str(exc).split())[:300]
        raise InputError(f"circuit: cannot be compiled to '{profile.name}' ({msg})") from None
    if out.layout is not None:
        l2c = tuple(int(i) for i in out.layout.final_index_layout(filter_ancillas=True))
    else:
        l2c = tuple(range(n))
    g2 = profile.two_qubit_gate
    ops = out.count_ops()
    return CompiledCircuit(
        circuit=out,
        patch=patch,
        logical_to_circuit=l2c,
        two_qubit_count=int(ops.get(g2, 0)),
        depth=int(out.depth(filter_function=lambda inst: inst.operation.name not in _STRUCTURAL)),
        duration_ns=circuit_duration_ns(out, profile),
        estimated_fidelity=estimate_fidelity(out, profile, patch),
        num_qubits=out.num_qubits,
        device_name=profile.name,
        source_parameters=tuple(circ.parameters),
    )
