"""Single-qubit channels of the measurement basis-change layer, read from a qiskit-aer noise model.

The basis layer (H for X, Sdg then H for Y, nothing for Z and I) is written in the device's native
single-qubit gates and scheduled "as late as possible" against the final measurement: every
measured qubit first idles for ``layer_ns - own_ns`` (``layer_ns`` the longest basis change of the
basis), then runs its own gates. The channel of each qubit is built exactly as qiskit-aer builds
it for the main circuit: the layer circuit is passed through the noise model's own noise passes
(relaxation on delays), then every gate is its unitary followed by the noise model's local (or
all-qubit) error for that gate on that qubit. Qubits measured in Z therefore pick up relaxation
over the whole layer, qubits measured in X or Y over their idle part plus their gates' errors.

A 2-outcome measurement after a single-qubit channel ``L`` has effects
``E^b = L^dagger(|b><b|)`` (Heisenberg picture); ``effects[b]`` is that 2x2 matrix.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
from qiskit import QuantumCircuit, transpile
from qiskit.circuit.library import get_standard_gate_name_mapping
from qiskit.quantum_info import SuperOp
from qiskit.transpiler.exceptions import TranspilerError

from noiselab.common.errors import InputError
from noiselab.device.aer_adapter import gate_error, instruction_error, run_noise_passes

#: Letters of a measurement basis; 'I' is measured like 'Z'.
BASIS_LETTERS = ("I", "X", "Y", "Z")


@dataclass(frozen=True)
class BasisLayerSpec:
    """What the basis-change layer needs from the device.

    ``native_1q``: names of the native single-qubit gates (e.g. ``("rz", "sx", "x")``).
    ``durations_ns``: ``{(gate name, circuit qubit): duration in ns}``; missing entries count 0.
    """

    native_1q: tuple[str, ...]
    durations_ns: Mapping[tuple[str, int], float] = field(default_factory=dict)

    def duration_ns(self, gate: str, qubit: int) -> float:
        return float(self.durations_ns.get((gate, qubit), 0.0))


@lru_cache(maxsize=64)
def native_basis_change(
    letter: str, native_1q: tuple[str, ...]
) -> tuple[tuple[str, tuple[float, ...]], ...]:
    """The basis change for ``letter`` as a tuple of ``(native gate, params)``, in circuit order.

    ``letter="FLIP"`` gives an X gate (state preparation for readout calibration).
    """
    qc = QuantumCircuit(1)
    if letter == "X":
        qc.h(0)
    elif letter == "Y":
        qc.sdg(0)
        qc.h(0)
    elif letter == "FLIP":  # the X gate of readout-calibration state preparation
        qc.x(0)
    elif letter in ("Z", "I"):
        return ()
    else:
        raise ValueError(f"unknown basis letter {letter!r}")
    try:
        out = transpile(qc, basis_gates=list(native_1q), optimization_level=1)
    except TranspilerError:
        raise InputError(
            f"emulation: native single-qubit gates {list(native_1q)} cannot express the "
            f"{'X gate' if letter == 'FLIP' else letter + '-basis change'}; allowed: natives "
            f"that include sx (with rz)"
        ) from None
    return tuple(
        (inst.operation.name, tuple(float(p) for p in inst.operation.params)) for inst in out.data
    )


@lru_cache(maxsize=1)
def _gate_mapping() -> dict[str, object]:
    """qiskit's standard gates by name (building the mapping costs about a millisecond)."""
    return get_standard_gate_name_mapping()


def gate_superop(name: str, params: Sequence[float]) -> np.ndarray:
    """Superoperator (column stacking, read-only, cached) of qiskit's standard gate ``name``."""
    return _gate_superop_cached(name, tuple(float(p) for p in params))


@lru_cache(maxsize=4096)
def _gate_superop_cached(name: str, params: tuple[float, ...]) -> np.ndarray:
    gate = _gate_mapping()[name]
    if params:
        gate = gate.__class__(*params)
    out = SuperOp(gate).data
    out.setflags(write=False)  # shared between callers
    return out


def _error_superop(noise_model: object, name: str, qubit: int) -> np.ndarray | None:
    """The noise model's error after gate ``name`` on ``qubit`` (local first, then all-qubit)."""
    err = gate_error(noise_model, name, (qubit,))
    if err is None:
        return None
    if err.num_qubits != 1:
        raise ValueError(f"noise model error on {name} has {err.num_qubits} qubits; expected 1")
    return SuperOp(err).data


def qubit_layer_superop(
    noise_model: object,
    num_qubits: int,
    qubit: int,
    gates: Sequence[tuple[str, tuple[float, ...]]],
    layer_ns: float,
    spec: BasisLayerSpec,
    *,
    noisy: bool = True,
) -> np.ndarray:
    """Liouville superoperator (4x4, qiskit's column-stacking) of ``qubit`` in an ALAP layer.

    The qubit idles ``layer_ns`` minus its own gate time, then runs ``gates``. The noise model's
    passes see a ``num_qubits``-wide circuit so that qubit indices match the main circuit. With
    ``noisy=False`` only the unitaries are kept.
    """
    own = sum(spec.duration_ns(g, qubit) for g, _ in gates)
    qc = QuantumCircuit(num_qubits)
    idle = layer_ns - own
    if idle > 1e-9:
        qc.delay(idle, qubit, unit="ns")
    mapping = _gate_mapping()
    for name, params in gates:
        gate = mapping[name]
        qc.append(gate.__class__(*params) if params else gate, [qubit])
    if noisy:
        qc = run_noise_passes(qc, noise_model)
    out = np.eye(4, dtype=complex)
    for inst in qc.data:
        op = inst.operation
        if op.name == "delay":
            continue
        if op.name == "quantum_channel":
            out = SuperOp(instruction_error(op)).data @ out
            continue
        out = gate_superop(op.name, [float(p) for p in op.params]) @ out
        if noisy:
            e = _error_superop(noise_model, op.name, qubit)
            if e is not None:
                out = e @ out
    return out


def effects_from_superop(superop: np.ndarray) -> np.ndarray:
    """Effects ``(2, 2, 2)``: ``[b] = L^dagger(|b><b|)`` for a 4x4 column-stacking superoperator."""
    s_dag = np.conj(np.asarray(superop)).T
    out = np.empty((2, 2, 2), dtype=complex)
    for b in (0, 1):
        proj = np.zeros((2, 2), dtype=complex)
        proj[b, b] = 1.0
        vec = s_dag @ proj.reshape(-1, order="F")
        e = vec.reshape(2, 2, order="F")
        out[b] = 0.5 * (e + e.conj().T)
    return out


def layer_duration_ns(measured: Mapping[int, str], spec: BasisLayerSpec) -> float:
    """Duration (ns) of the basis layer: the longest basis change among the measured qubits."""
    return max(
        (
            sum(spec.duration_ns(g, q) for g, _ in native_basis_change(letter, spec.native_1q))
            for q, letter in measured.items()
        ),
        default=0.0,
    )


class EffectCache:
    """Effect tensors per (circuit qubit, letter, layer duration) of one noise model and layer
    spec; :func:`effect_cache_for` shares one across calls (the tables depend on the noise model,
    never on the circuit, so a loop over bound circuits builds them once)."""

    def __init__(
        self, noise_model: object, num_qubits: int, spec: BasisLayerSpec, *, noisy: bool = True
    ) -> None:
        self.noise_model = noise_model
        self.num_qubits = num_qubits
        self.spec = spec
        self.noisy = noisy
        self._cache: dict[tuple[int, str, float], np.ndarray] = {}

    def get(self, qubit: int, letter: str, layer_ns: float) -> np.ndarray:
        key = (qubit, "Z" if letter == "I" else letter, round(float(layer_ns), 6))
        if key not in self._cache:
            gates = native_basis_change(key[1], self.spec.native_1q)
            sop = qubit_layer_superop(
                self.noise_model,
                self.num_qubits,
                qubit,
                gates,
                key[2],
                self.spec,
                noisy=self.noisy,
            )
            self._cache[key] = effects_from_superop(sop)
        return self._cache[key]


#: Effect caches by noise model (identity; the entry keeps the model alive) and layer spec, most
#: recently used last; the noise models themselves are memoized per process the same way
#: (``emulate.device_inputs.noise_model_for``).
_EFFECT_CACHES: dict[tuple[int, int, tuple, bool], tuple[object, EffectCache]] = {}
_EFFECT_CACHE_SLOTS = 16


def effect_cache_for(
    noise_model: object, num_qubits: int, spec: BasisLayerSpec, *, noisy: bool = True
) -> EffectCache:
    """The :class:`EffectCache` of this noise model, width and layer spec, shared per process
    (last 16). Callers must not modify the noise model afterwards (nor do they: see
    ``noise_model_for``)."""
    spec_key = (spec.native_1q, tuple(sorted(spec.durations_ns.items())))
    key = (id(noise_model), int(num_qubits), spec_key, bool(noisy))
    entry = _EFFECT_CACHES.pop(key, None)
    if entry is None or entry[0] is not noise_model:
        entry = (noise_model, EffectCache(noise_model, num_qubits, spec, noisy=noisy))
        while len(_EFFECT_CACHES) >= _EFFECT_CACHE_SLOTS:
            _EFFECT_CACHES.pop(next(iter(_EFFECT_CACHES)))
    _EFFECT_CACHES[key] = entry
    return entry[1]
