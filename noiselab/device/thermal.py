"""Closed forms for relaxation and depolarizing infidelities (numpy only, no qiskit).

Conventions (Nielsen & Chuang sec. 8.3; Nielsen, Phys. Lett. A 303, 249 (2002)):

* thermal relaxation to the ground state over time t: excited population decays as exp(-t/T1),
  coherence as exp(-t/T2). Its Pauli transfer matrix is diag(1, e2, e2, e1) plus a non-unital
  column, so the entanglement fidelity is F_e = (1 + 2 exp(-t/T2) + exp(-t/T1)) / 4;
* entanglement fidelity is multiplicative under tensor products (trace of a Kronecker product);
* average gate fidelity F_avg = (d F_e + 1) / (d + 1), average infidelity r = 1 - F_avg;
* a d-dimensional depolarizing channel rho -> (1-p) rho + p Tr(rho) I/d composed (either order)
  with any channel E has F_e = (1 - p) F_e(E) + p / d**2, exactly. So the depolarizing parameter
  that brings a gate to a quoted total infidelity follows in closed form, no numerical solve.

Times: ``t_ns`` in nanoseconds, ``t1_us``/``t2_us`` in microseconds; ``None`` means infinite.
"""

from __future__ import annotations

import math
from collections.abc import Sequence


def decay_factor(t_ns: float, time_us: float | None) -> float:
    """exp(-t/T) with t in ns and T in us; 1.0 for an infinite (None) time."""
    if time_us is None or math.isinf(time_us):
        return 1.0
    return math.exp(-(t_ns * 1e-3) / time_us)


def relaxation_entanglement_fidelity(
    t_ns: float, t1_us: float | None, t2_us: float | None
) -> float:
    """Entanglement fidelity of single-qubit thermal relaxation (to |0>) over ``t_ns``."""
    return (1.0 + 2.0 * decay_factor(t_ns, t2_us) + decay_factor(t_ns, t1_us)) / 4.0


def entanglement_to_average_infidelity(f_e: float, dim: int) -> float:
    """Average gate infidelity r = 1 - (d F_e + 1)/(d + 1)."""
    return 1.0 - (dim * f_e + 1.0) / (dim + 1.0)


def average_infidelity_to_entanglement(r: float, dim: int) -> float:
    """Inverse of :func:`entanglement_to_average_infidelity`: F_e = 1 - r (d + 1)/d."""
    return 1.0 - r * (dim + 1.0) / dim


def relaxation_infidelity(
    t_ns: float, coherence: Sequence[tuple[float | None, float | None]]
) -> float:
    """Average infidelity of independent relaxation on each qubit over ``t_ns``.

    ``coherence`` holds one ``(t1_us, t2_us)`` per qubit the gate acts on (qubit 0 first).
    """
    f_e = 1.0
    for t1_us, t2_us in coherence:
        f_e *= relaxation_entanglement_fidelity(t_ns, t1_us, t2_us)
    return entanglement_to_average_infidelity(f_e, 2 ** len(coherence))


def depolarizing_for_total(
    relax_infidelity: float, total_infidelity: float, num_qubits: int
) -> float:
    """Depolarizing parameter p giving ``total_infidelity`` when composed with the relaxation.

    Returns 0.0 when relaxation alone already exceeds the total (the caller warns) and at most
    1.0 (full depolarization, reached at r = (d-1)/d).
    """
    d = 2**num_qubits
    f_relax = average_infidelity_to_entanglement(relax_infidelity, d)
    f_target = average_infidelity_to_entanglement(total_infidelity, d)
    if f_target >= f_relax:
        return 0.0
    p = (f_relax - f_target) / (f_relax - 1.0 / d**2)
    return min(max(p, 0.0), 1.0)


def idle_time_for_infidelity_ns(
    target: float, t1_us: float | None, t2_us: float | None
) -> float | None:
    """Idle time (ns) after which single-qubit relaxation reaches average infidelity ``target``.

    ``None`` when coherence is infinite. Solved by bisection (the infidelity grows monotonically).
    """
    if (t1_us is None or math.isinf(t1_us)) and (t2_us is None or math.isinf(t2_us)):
        return None
    times = [t for t in (t1_us, t2_us) if t is not None and not math.isinf(t)]
    lo, hi = 0.0, 1e3 * 50.0 * max(times)
    if relaxation_infidelity(hi, [(t1_us, t2_us)]) < target:
        return None
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if relaxation_infidelity(mid, [(t1_us, t2_us)]) < target:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)
