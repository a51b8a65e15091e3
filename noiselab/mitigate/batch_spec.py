"""Which per-batch values a trajectory run keeps so that every recipe's trajectory error can be
computed without per-batch distributions (:mod:`noiselab.emulate.batch_values`).

Per measured basis the masks are the supports of the plan's terms measured there; with
symmetries, also those terms times every product of the symmetries a basis reveals (discard
post-selection) and the terms of ``H P`` and ``P`` verification assigns to the basis (every
subset of the symmetries, as :func:`noiselab.mitigate.symmetry.verification_bases` does). The
transforms are the identity and the inverse per-qubit assignment matrices of the variant's exact
readout calibration (per-qubit readout correction). Recipes whose estimators read other
functionals of the outcomes (full or simplex-projected readout inversion, error cancellation,
distillation, Clifford regression) need the per-batch distributions.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from itertools import combinations
from typing import Any

import numpy as np

from noiselab.emulate.batch_values import BatchValueSpec
from noiselab.emulate.calibration import per_qubit_matrices
from noiselab.mitigate.plan import first_compatible, measurable_in
from noiselab.mitigate.symmetry import symmetry_table, verification_ops
from noiselab.mitigate.variants import CircuitVariant

#: passes whose estimators read only term parities (readout: its per_qubit_inverse method)
VALUE_PASSES = ("readout", "postselect", "extrapolate", "twirl", "decouple", "measure_twirl")
#: what to name in a refusal
VALUE_RECIPES = (
    "passes readout (per_qubit_inverse), postselect, extrapolate, twirl, decouple, measure_twirl"
)


def needs_distributions(passes: Iterable[Mapping[str, Any]]) -> str | None:
    """The first pass entry of a recipe that needs per-batch distributions (its description),
    or None when per-batch values serve the whole recipe."""
    for entry in passes:
        name = str(entry.get("pass"))
        if name not in VALUE_PASSES:
            return name
        if name == "readout" and entry.get("method", "per_qubit_inverse") != "per_qubit_inverse":
            return f"readout {entry.get('method')}"
    return None


def label_masks(labels: Sequence[str], num_qubits: int) -> np.ndarray:
    """Support masks (bit q: qubit q, the rightmost letter) of Pauli labels, as int64."""
    if not labels:
        return np.zeros(0, dtype=np.int64)
    lab = np.frombuffer("".join(labels).encode("ascii"), dtype=np.uint8).reshape(len(labels), -1)
    bits = (lab != ord("I")).astype(np.int64)
    return bits @ (np.int64(1) << np.arange(num_qubits - 1, -1, -1, dtype=np.int64))


def _products(masks: Sequence[int]) -> list[int]:
    """XOR of every subset of ``masks`` (the empty one included)."""
    out = [0]
    for m in masks:
        out = out + [x ^ m for x in out]
    return out


def value_masks(ctx: Any) -> tuple[np.ndarray, ...]:
    """Sorted masks per basis of ``ctx.measured_bases`` (see the module docstring); memoized on
    the context."""
    known = ctx.__dict__.get("_value_masks")
    if known is not None:
        return known
    n = ctx.plan.num_qubits
    bases = list(ctx.measured_bases)
    index = {b: i for i, b in enumerate(bases)}
    per: list[set[int]] = [set() for _ in bases]
    table = list(symmetry_table(ctx.problem).values())
    sym_masks = label_masks([lab for lab, _ in table], n)
    for g in ctx.plan.groups:
        terms = label_masks(list(g.labels), n)
        revealed = [
            int(m)
            for (lab, _), m in zip(table, sym_masks, strict=True)
            if measurable_in(lab, g.basis)
        ]
        for s in _products(revealed):
            per[index[g.basis]].update(int(t) ^ s for t in terms)
            per[index[g.basis]].add(s)
    if table and ctx.verification_bases:
        for r in range(1, len(table) + 1):
            for subset in combinations(table, r):
                for op in verification_ops(ctx.problem.hamiltonian, subset):
                    labels = [lab for lab in op.paulis.to_labels() if set(lab) != {"I"}]
                    where = first_compatible(labels, bases)
                    for m, j in zip(label_masks(labels, n), where, strict=True):
                        if j >= 0:
                            per[j].add(int(m))
    out = tuple(np.array(sorted(p), dtype=np.uint64) for p in per)
    ctx.__dict__["_value_masks"] = out
    return out


def batch_value_spec(ctx: Any, variant: CircuitVariant) -> BatchValueSpec:
    """The per-batch values a trajectory run of ``variant`` keeps: :func:`value_masks`, under
    the identity and the inverse of the variant's exact per-qubit readout calibration."""
    n = ctx.plan.num_qubits
    cal = ctx.calibrator(variant.calibration_variant(), (0, 2**n - 1))
    mats = per_qubit_matrices(cal[0], cal[1], n)
    inverse: list[np.ndarray] = []
    for m in mats:
        if abs(np.linalg.det(m)) < 1e-12:  # readout near 50%: the correction is refused anyway
            return BatchValueSpec(value_masks(ctx))
        inverse.append(np.linalg.inv(m))
    return BatchValueSpec(value_masks(ctx), (None, tuple(inverse)))
