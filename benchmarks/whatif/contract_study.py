"""Simulation versus contraction time of one variant of a study (default hchain-12).

    python benchmarks/whatif/contract_study.py [STUDY.yaml] [--old PATH]

Captures the density matrix of the noise-free-scaled variant's run, reports the qiskit-aer time,
then times ``dm_distributions`` with one thread and with ``contraction_threads()`` (and, with
``--old PATH``, an earlier contract.py) on the same matrix and bases.
"""

from __future__ import annotations

import importlib.util
import sys
import time
from pathlib import Path
from typing import Any

import numpy as np

HERE = Path(__file__).resolve().parents[1]


def main(argv: list[str]) -> None:
    import noiselab.emulate.contract as contract
    import noiselab.emulate.engine as engine
    from noiselab.mitigate.experiment import make_runner
    from noiselab.mitigate.variants import CircuitVariant
    from noiselab.study.context import build_context
    from noiselab.study.spec import load_study

    old = None
    if "--old" in argv:
        i = argv.index("--old")
        spec = importlib.util.spec_from_file_location("contract_old", argv[i + 1])
        old = importlib.util.module_from_spec(spec)  # type: ignore[arg-type]
        spec.loader.exec_module(old)  # type: ignore[union-attr]
        argv = argv[:i] + argv[i + 2 :]
    study_file = argv[0] if argv else str(HERE / "studies" / "hchain-12.yaml")
    captured: dict[str, Any] = {}
    sim, dm = engine.simulate_density_matrix, engine.dm_distributions

    def grab_sim(circuit: Any, nm: Any) -> Any:
        t = time.perf_counter()
        rho = sim(circuit, nm)
        captured["aer_s"] = time.perf_counter() - t
        return rho

    def grab_dm(rho: Any, qubits: Any, effects: Any, keys: Any, **kw: Any) -> Any:
        mat = rho[0] if isinstance(rho, list) else rho
        captured.update(rho=np.array(mat, order="F"), qubits=qubits, effects=effects, keys=keys)
        t = time.perf_counter()
        res = dm(rho, qubits, effects, keys, **kw)
        captured["dm_s"] = time.perf_counter() - t
        return res

    engine.simulate_density_matrix, engine.dm_distributions = grab_sim, grab_dm
    try:
        ctx = build_context(load_study(study_file), cache=None)
        make_runner(ctx.experiment)(CircuitVariant())
    finally:
        engine.simulate_density_matrix, engine.dm_distributions = sim, dm
    rho, qubits = captured["rho"], captured["qubits"]
    effects, keys = captured["effects"], captured["keys"]
    line = (
        f"{Path(study_file).name}: {len(effects)} bases on {len(qubits)} qubits; aer "
        f"{captured['aer_s']:.2f} s, contraction in the run {captured['dm_s']:.2f} s"
    )
    t = time.perf_counter()
    one = dm(rho, qubits, effects, keys, threads=1)
    line += f"; again 1 thread {time.perf_counter() - t:.2f} s"
    t = time.perf_counter()
    many = dm(rho, qubits, effects, keys)
    line += f", {contract.contraction_threads()} threads {time.perf_counter() - t:.2f} s"
    line += f" (max |diff| {np.abs(one - many).max():.1e})"
    if old is not None:
        t = time.perf_counter()
        ref = old.dm_distributions(rho, qubits, effects, keys)
        line += f"; old {time.perf_counter() - t:.2f} s (max |diff| {np.abs(ref - one).max():.1e})"
    print(line, flush=True)


if __name__ == "__main__":
    main(sys.argv[1:])
