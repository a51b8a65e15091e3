"""Basis contraction kernel: against the Born rule with Kronecker effects; threads vs serial."""

from __future__ import annotations

import functools

import numpy as np
import pytest

from noiselab.emulate import contract

PAULI = {
    "X": np.array([[0, 1], [1, 0]], dtype=complex),
    "Y": np.array([[0, -1j], [1j, 0]]),
    "Z": np.diag([1.0, -1.0]).astype(complex),
}


def _random_state(k: int, rng: np.random.Generator) -> np.ndarray:
    a = rng.standard_normal((2**k, 2**k)) + 1j * rng.standard_normal((2**k, 2**k))
    rho = a @ a.conj().T
    return rho / np.trace(rho).real


def _effect(letter: str, shrink: float, phase: float) -> np.ndarray:
    """A noisy two-outcome POVM: a shrunk, slightly tilted Pauli projector pair."""
    p = (1 - shrink) * (np.cos(phase) * PAULI[letter] + np.sin(phase) * PAULI["Z"])
    e0 = 0.5 * (np.eye(2) + p) + 0.01 * np.eye(2)
    return np.stack([e0, np.eye(2) - e0])


@functools.lru_cache(maxsize=1)
def _case() -> tuple:
    rng = np.random.default_rng(11)
    k = 6
    qubits = [4, 0, 5, 2, 1]  # circuit qubit 3 unmeasured, routing scrambled
    n = len(qubits)
    rho = _random_state(k, rng)
    bases = sorted({"".join(rng.choice(list("XYZ"), size=n)) for _ in range(60)})
    table = {(l, c): _effect(c, 0.02 * (l + 1), 0.05 * l) for l in range(n) for c in "XYZ"}
    effects = [[table[(l, b[n - 1 - l])] for l in range(n)] for b in bases]
    keys = [[b[n - 1 - l] for l in range(n)] for b in bases]
    return rho, qubits, effects, keys


def _born_rule(rho: np.ndarray, qubits: list[int], effects: list[np.ndarray]) -> np.ndarray:
    """p(m) = Tr(rho (x)_c F_c) with F_c the effect of the outcome bit on circuit qubit c and the
    identity on unmeasured ones (source: Born rule for POVMs, Nielsen & Chuang eq. 2.143)."""
    k = rho.shape[0].bit_length() - 1
    n = len(qubits)
    out = np.empty(2**n)
    for m in range(2**n):
        per_c = {qubits[l]: effects[l][(m >> l) & 1] for l in range(n)}
        op = np.ones((1, 1))
        for c in range(k):  # circuit qubit c is bit c: kron puts the higher qubits on the left
            op = np.kron(per_c.get(c, np.eye(2)), op)
        out[m] = np.trace(rho @ op).real
    return out


def test_contraction_matches_born_rule_with_traced_qubit() -> None:
    rho, qubits, effects, keys = _case()
    got = contract.dm_distributions(rho, qubits, effects, keys, threads=1)
    for i in range(0, len(effects), 7):
        np.testing.assert_allclose(got[i], _born_rule(rho, qubits, effects[i]), atol=1e-12)


@pytest.mark.parametrize("layout", ["C", "F", "holder"])
def test_threaded_equals_serial(monkeypatch: pytest.MonkeyPatch, layout: str) -> None:
    """Thread pool (row blocks of the products split over 3 threads; block size lowered so a
    6-qubit state is split) gives the serial distributions to 1e-12, whatever the layout."""
    import concurrent.futures

    rho, qubits, effects, keys = _case()
    serial = contract.dm_distributions(rho, qubits, effects, keys, threads=1)
    monkeypatch.setattr(contract, "STEP_ROWS", 8)
    calls: list[int] = []
    original = concurrent.futures.ThreadPoolExecutor.map

    def spy(self: object, *args: object, **kw: object) -> object:
        calls.append(1)
        return original(self, *args, **kw)  # type: ignore[arg-type]

    monkeypatch.setattr(concurrent.futures.ThreadPoolExecutor, "map", spy)
    arg: object = np.asfortranarray(rho) if layout == "F" else np.array(rho)
    if layout == "holder":
        arg = [np.asfortranarray(rho)]
    threaded = contract.dm_distributions(arg, qubits, effects, keys, threads=3)  # type: ignore[arg-type]
    np.testing.assert_allclose(threaded, serial, atol=1e-12, rtol=0)
    if layout == "holder":
        assert arg == []  # the matrix was released once copied
    assert len(calls) > 3  # the thread pool really ran


def test_thread_count_from_environment(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("NOISELAB_ENGINE_THREADS", "1")
    assert contract.contraction_threads() == 1
    monkeypatch.setenv("NOISELAB_ENGINE_THREADS", "0")
    assert contract.contraction_threads() >= 1
