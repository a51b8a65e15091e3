"""What-if for the overhead benchmark: the basis contraction split over two threads.

    python benchmarks/whatif/contract_threads.py [STUDY.yaml]   # default hchain-12

The contraction of the density matrix to every measured basis (noiselab.emulate.contract) runs
numpy element-wise kernels on one core, while qiskit-aer uses all of them. This script captures
the density matrix of one simulation, times ``dm_distributions`` as it is, then again with the
bases split by their effect on the first contracted qubit and the parts run in two threads (numpy
releases the GIL), and checks the distributions agree.
"""

from __future__ import annotations

import concurrent.futures
import sys
import time
from pathlib import Path
from typing import Any

import numpy as np

HERE = Path(__file__).resolve().parents[1]


def main(study_file: str) -> None:
    import noiselab.emulate.contract as contract
    import noiselab.emulate.engine as engine
    from noiselab.mitigate.experiment import make_runner
    from noiselab.mitigate.variants import CircuitVariant
    from noiselab.study.context import build_context
    from noiselab.study.spec import load_study

    captured: dict[str, Any] = {}
    original = engine.dm_distributions

    def grab(rho: Any, qubits: Any, effects: Any, keys: Any) -> Any:
        captured.update(rho=np.array(rho), qubits=qubits, effects=effects, keys=keys)
        return original(rho, qubits, effects, keys)

    engine.dm_distributions = grab
    try:
        ctx = build_context(load_study(study_file), cache=None)
        make_runner(ctx.experiment)(CircuitVariant())
    finally:
        engine.dm_distributions = original
    rho, qubits = captured["rho"], captured["qubits"]
    effects, keys = captured["effects"], captured["keys"]
    t = time.perf_counter()
    one = original(rho, qubits, effects, keys)
    one_s = time.perf_counter() - t
    first = contract._order_by_sharing(keys, len(qubits))[0]
    groups: dict[Any, list[int]] = {}
    for i, k in enumerate(keys):
        groups.setdefault(k[first], []).append(i)

    def part(members: list[int]) -> tuple[list[int], np.ndarray]:
        sub_e = [effects[i] for i in members]
        return members, original(rho, qubits, sub_e, [keys[i] for i in members])

    t = time.perf_counter()
    two = np.empty_like(one)
    with concurrent.futures.ThreadPoolExecutor(2) as pool:
        for members, res in pool.map(part, groups.values()):
            two[members] = res
    two_s = time.perf_counter() - t
    print(
        f"{len(effects)} bases on {len(qubits)} qubits: contraction {one_s:.2f} s in one thread, "
        f"{two_s:.2f} s in two; same distributions: {np.allclose(one, two, atol=1e-14)}"
    )


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else str(HERE / "studies" / "hchain-12.yaml"))
