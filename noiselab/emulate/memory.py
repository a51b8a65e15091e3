"""Memory guard: refuse an emulation that does not fit this machine instead of swapping or crashing.

The density-matrix estimate is ``DM_COPIES * 16 * 4**k`` bytes for a k-qubit circuit plus a fixed
overhead. ``DM_COPIES`` covers the simulator's state and the copy it hands back for
``save_density_matrix`` (about 1.5 density matrices at the peak of the run, measured), then the
numpy array we keep plus the contraction intermediates (at most one more). Measured peak resident
memory above the interpreter baseline, 100 bases (``benchmarks/emulate_memory.py``, 2 cores):
2.73 density matrices at 11 qubits, 2.39 at 12; we use 3.0 to keep a margin.

The thread count of the engine (``$NOISELAB_ENGINE_THREADS``) is read here too: the emulator,
the basis contraction and the study layer's worker processes share it.
"""

from __future__ import annotations

import os

from noiselab.common.errors import ProblemTooLargeError
from noiselab.common.memory import (
    GIB,
    MEMORY_LIMIT_ENV,
    available_memory_bytes,
    memory_budget,
)

__all__ = [
    "ENGINE_THREADS_ENV",
    "GIB",
    "MEMORY_LIMIT_ENV",
    "available_memory_bytes",
    "check_memory",
    "engine_threads",
    "estimate_memory_bytes",
    "fits_in_memory",
]

#: Copies of a 16 * 4**k byte density matrix alive at the peak (measured 2.4-2.7, rounded up).
DM_COPIES = 3.0
#: Fixed overhead of the interpreter, qiskit and aer (bytes).
BASE_OVERHEAD_BYTES = 300 * 2**20
#: Statevector copies per trajectory in flight (simulator state, saved copy, numpy copy), plus
#: one per measured qubit (the basis contraction keeps a rotated copy per level of its tree).
SV_COPIES = 3.0
#: Distribution-sized arrays per basis alive when only per-batch values are kept: the two sums
#: (before and after readout), the batch (before and after readout, with the readout's and the
#: per-qubit transform's temporaries) and the Walsh transform. Measured
#: (``benchmarks/trajectory_memory.py``, 200 bases, 8 batches, peak above the baseline less a
#: fixed ~20 MiB): 7.9 at 10 and 12 qubits; 10 keeps a margin.
VALUE_STORE_COPIES = 10.0
#: With per-batch distributions kept: arrays per batch (the batches before and after readout
#: and the readout's temporaries; measured 3.2 per batch plus 4, as above) and fixed copies.
DIST_STORE_PER_BATCH = 4.0
DIST_STORE_FIXED = 4.0

#: qiskit-aer ``max_parallel_threads`` (0 = all cores); set by the study layer's worker processes.
ENGINE_THREADS_ENV = "NOISELAB_ENGINE_THREADS"


def engine_threads() -> int:
    """Threads qiskit-aer may use in this process (0 = all), from ``$NOISELAB_ENGINE_THREADS``."""
    try:
        return max(0, int(os.environ.get(ENGINE_THREADS_ENV, "0")))
    except ValueError:
        return 0


def estimate_memory_bytes(
    num_qubits: int,
    method: str = "density_matrix",
    *,
    trajectories_per_batch: int = 1,
    num_bases: int = 1,
    num_batches: int = 1,
    num_values: int = -1,
    num_qubits_measured: int | None = None,
) -> int:
    """Estimated peak memory in bytes of emulating ``num_qubits`` circuit qubits with ``method``.

    ``method`` is ``"density_matrix"`` or ``"trajectory"``; for trajectories the per-batch
    statevectors and the stored batch distributions (``num_batches x num_bases x 2**n`` floats,
    before and after readout, and temporaries) are counted, or with ``num_values >= 0`` (per-batch
    estimator values kept instead, :mod:`noiselab.emulate.batch_values`) the
    ``VALUE_STORE_COPIES`` distribution-sized arrays of one batch and the ``num_batches x
    num_values`` values. ``num_qubits_measured``: n (default: all circuit qubits).
    """
    k = int(num_qubits)
    if method == "density_matrix":
        return int(DM_COPIES * 16 * 4**k + BASE_OVERHEAD_BYTES)
    if method == "trajectory":
        n = k if num_qubits_measured is None else int(num_qubits_measured)
        states = (SV_COPIES + n) * 16 * 2**k * max(1, trajectories_per_batch)
        if num_values >= 0:
            dists = 8 * 2**n * max(1, num_bases) * VALUE_STORE_COPIES
            dists += 8 * max(1, num_batches) * num_values
        else:
            copies = DIST_STORE_PER_BATCH * max(1, num_batches) + DIST_STORE_FIXED
            dists = 8 * 2**n * max(1, num_bases) * copies
        return int(states + dists + BASE_OVERHEAD_BYTES)
    raise ValueError(f"unknown method {method!r}")


def fits_in_memory(num_qubits: int, method: str = "density_matrix", **kwargs: int) -> bool:
    """Whether :func:`estimate_memory_bytes` fits in :func:`available_memory_bytes`."""
    return estimate_memory_bytes(num_qubits, method, **kwargs) <= available_memory_bytes()


def check_memory(num_qubits: int, method: str = "density_matrix", **kwargs: int | None) -> None:
    """Raise :class:`ProblemTooLargeError` (one line) when the emulation would not fit."""
    need = estimate_memory_bytes(num_qubits, method, **kwargs)  # type: ignore[arg-type]
    budget = memory_budget()
    if need > budget.usable:
        what = "density matrix" if method == "density_matrix" else "trajectory emulation"
        if method == "trajectory":
            values = kwargs.get("num_values")
            kept = "values" if values is not None and values >= 0 else "distributions"
            what += f" (keeping per-batch {kept})"
        raise ProblemTooLargeError(
            f"emulation: {num_qubits} qubits need about {need / GIB:.2f} GiB for the {what} but "
            f"only {budget.describe()}; allowed: fewer qubits (a smaller active "
            f"space or patch), method 'auto' or 'trajectory', or more memory"
        )
