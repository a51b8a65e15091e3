"""Timing of the basis contraction (noiselab.emulate.contract.dm_distributions) alone.

    python benchmarks/whatif/contract_bench.py [N_QUBITS] [N_BASES ...] [--old PATH]

A random mixed state on N_QUBITS (default 12) and random X/Y/Z bases (default 180 and 770, the
counts of the 12-qubit benchmark study before and after cutting the bases) with slightly noisy
effects, keyed like the engine's. Times the contraction with one thread and with
``contraction_threads()``, checks they agree to 1e-12, and with ``--old PATH`` (a copy of an
earlier contract.py) times that one too and compares.
"""

from __future__ import annotations

import importlib.util
import sys
import time

import numpy as np

from noiselab.emulate.contract import contraction_threads, dm_distributions

PAULI = {
    "X": np.array([[0, 1], [1, 0]], dtype=complex),
    "Y": np.array([[0, -1j], [1j, 0]]),
    "Z": np.diag([1.0, -1.0]).astype(complex),
}


def random_state(k: int, rng: np.random.Generator, rank: int = 64) -> np.ndarray:
    a = rng.standard_normal((2**k, rank)) + 1j * rng.standard_normal((2**k, rank))
    rho = a @ a.conj().T
    return rho / np.trace(rho).real


def effect(letter: str, shrink: float) -> np.ndarray:
    e0 = 0.5 * (np.eye(2) + (1 - shrink) * PAULI[letter])
    return np.stack([e0, np.eye(2) - e0])


def random_bases(n: int, count: int, rng: np.random.Generator) -> list[str]:
    out: set[str] = set()
    while len(out) < count:
        out.add("".join(rng.choice(list("XYZ"), size=n)))
    return sorted(out)


def tables(bases: list[str], n: int) -> tuple[list[list[np.ndarray]], list[list[tuple]]]:
    cache = {(q, c): effect(c, 0.01 + 0.001 * q) for q in range(n) for c in "XYZ"}
    effects = [[cache[(l, b[n - 1 - l])] for l in range(n)] for b in bases]
    keys = [[(b[n - 1 - l],) for l in range(n)] for b in bases]
    return effects, keys


def timed(fn, *args, **kw) -> tuple[float, np.ndarray]:  # type: ignore[no-untyped-def]
    t = time.perf_counter()
    res = fn(*args, **kw)
    return time.perf_counter() - t, res


def main(argv: list[str]) -> None:
    old = None
    if "--old" in argv:
        i = argv.index("--old")
        spec = importlib.util.spec_from_file_location("contract_old", argv[i + 1])
        old = importlib.util.module_from_spec(spec)  # type: ignore[arg-type]
        spec.loader.exec_module(old)  # type: ignore[union-attr]
        argv = argv[:i] + argv[i + 2 :]
    k = int(argv[0]) if argv else 12
    counts = [int(a) for a in argv[1:]] or [180, 770]
    rng = np.random.default_rng(7)
    rho = np.asfortranarray(random_state(k, rng))  # column-major, as qiskit-aer returns it
    qubits = list(range(k))
    for count in counts:
        bases = random_bases(k, count, rng)
        effects, keys = tables(bases, k)
        t1, p1 = timed(dm_distributions, rho, qubits, effects, keys, threads=1)
        tn, pn = timed(dm_distributions, rho, qubits, effects, keys)
        line = (
            f"{k} qubits, {count} bases: 1 thread {t1:.2f} s, {contraction_threads()} threads "
            f"{tn:.2f} s, max |diff| {np.abs(p1 - pn).max():.1e}"
        )
        if old is not None:
            to, po = timed(old.dm_distributions, rho, qubits, effects, keys)
            line += f"; old {to:.2f} s, max |diff| vs old {np.abs(po - pn).max():.1e}"
        print(line, flush=True)


if __name__ == "__main__":
    main(sys.argv[1:])
