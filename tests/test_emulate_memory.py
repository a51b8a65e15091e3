"""Memory guard: estimates, available memory, one-line refusals."""

from __future__ import annotations

from pathlib import Path

import pytest
from helpers.toy import toy_device

from noiselab.common.errors import ProblemTooLargeError
from noiselab.emulate.engine import emulate_circuit_bases
from noiselab.emulate.memory import (
    MEMORY_LIMIT_ENV,
    available_memory_bytes,
    check_memory,
    estimate_memory_bytes,
)


def test_estimate_covers_the_density_matrix() -> None:
    for n in range(1, 21):
        # from memory: a complex128 density matrix on n qubits holds 4**n entries of 16 bytes
        assert estimate_memory_bytes(n) >= 16 * 4**n
    # source: REFERENCES.md library notes, 12 qubits: 268 MB for one copy
    assert estimate_memory_bytes(12) > 268e6
    assert estimate_memory_bytes(12, "trajectory") < estimate_memory_bytes(12)


def test_available_memory(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv(MEMORY_LIMIT_ENV, raising=False)
    have = available_memory_bytes()
    meminfo = Path("/proc/meminfo")
    if meminfo.exists():
        total_kib = next(
            int(line.split()[1])
            for line in meminfo.read_text().splitlines()
            if line.startswith("MemTotal:")
        )
        assert 0 < have <= total_kib * 1024
    monkeypatch.setenv(MEMORY_LIMIT_ENV, "123456789")
    assert available_memory_bytes() == 123456789
    monkeypatch.setenv(MEMORY_LIMIT_ENV, "lots")
    with pytest.raises(ProblemTooLargeError, match=MEMORY_LIMIT_ENV):
        available_memory_bytes()


def test_refusal_is_one_line_with_qubits_and_gib(monkeypatch: pytest.MonkeyPatch) -> None:
    from qiskit import QuantumCircuit

    monkeypatch.setenv(MEMORY_LIMIT_ENV, str(2**30))
    dev = toy_device(14)
    with pytest.raises(ProblemTooLargeError) as info:
        emulate_circuit_bases(
            QuantumCircuit(14),
            dev.noise_model,
            ["Z" * 14],
            layer=dev.layer,
            method="density_matrix",
        )
    msg = str(info.value)
    assert "\n" not in msg
    assert "14 qubits" in msg and "GiB" in msg and "1 GiB usable" in msg
    with pytest.raises(ProblemTooLargeError, match="14 qubits"):
        check_memory(14)


def test_qubit_cap_refusal() -> None:
    from qiskit import QuantumCircuit

    dev = toy_device(5)
    with pytest.raises(ProblemTooLargeError, match="5 qubits exceed the density-matrix limit of 4"):
        emulate_circuit_bases(
            QuantumCircuit(5),
            dev.noise_model,
            ["Z" * 5],
            layer=dev.layer,
            method="density_matrix",
            max_density_matrix_qubits=4,
        )
