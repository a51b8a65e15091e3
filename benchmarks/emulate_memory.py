"""Peak memory and time of one density-matrix emulation (calibrates noiselab.emulate.memory).

Run: python benchmarks/emulate_memory.py 10 11   (each size in a fresh process)
Prints the peak resident memory above the post-import baseline, in units of 16 * 4**k bytes.
"""

from __future__ import annotations

import resource
import subprocess
import sys
import time


def one(k: int) -> None:
    import numpy as np

    from noiselab.emulate.engine import emulate_circuit_bases
    from noiselab.emulate.toy import compile_toy, toy_circuit, toy_device

    dev = toy_device(k)
    qc = compile_toy(toy_circuit(k, layers=2), dev)
    rng = np.random.default_rng(0)
    bases = ["".join(rng.choice(list("IXYZ"), k)) for _ in range(100)]
    base = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    t0 = time.perf_counter()
    out = emulate_circuit_bases(qc, dev.noise_model, bases, layer=dev.layer, method="density_matrix")
    dt = time.perf_counter() - t0
    from noiselab.emulate.channels import EffectCache
    from noiselab.emulate.contract import dm_distributions
    from noiselab.emulate.engine import _basis_tables, simulate_density_matrix

    t1 = time.perf_counter()
    rho = simulate_density_matrix(qc, dev.noise_model)
    t2 = time.perf_counter()
    effects, keys = _basis_tables(bases, list(range(k)), EffectCache(dev.noise_model, k, dev.layer))
    t3 = time.perf_counter()
    dm_distributions(rho, list(range(k)), effects, keys)
    t4 = time.perf_counter()
    print(f"{k} qubits: simulation {t2 - t1:.2f} s, effects {t3 - t2:.2f} s, contraction {t4 - t3:.2f} s")
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    dm = 16 * 4**k
    print(
        f"{k} qubits: {len(qc.data)} ops, 100 bases, {dt:.2f} s; peak above baseline "
        f"{(peak - base) / 2**20:.0f} MiB = {(peak - base) / dm:.2f} x 16*4^k; "
        f"baseline {base / 2**20:.0f} MiB; rows sum {out.probs.sum(axis=1).max():.12f}"
    )


if __name__ == "__main__":
    if len(sys.argv) > 2 or (len(sys.argv) == 2 and sys.argv[1] == "all"):
        sizes = [a for a in sys.argv[1:] if a != "all"] or ["4", "8", "10", "11", "12"]
        for s in sizes:
            subprocess.run([sys.executable, __file__, s], check=True)
    else:
        one(int(sys.argv[1]))
