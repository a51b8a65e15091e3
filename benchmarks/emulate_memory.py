"""Peak memory and time of one density-matrix emulation (calibrates noiselab.emulate.memory).

Run: python benchmarks/emulate_memory.py 4 8 10 12   (each size in a fresh process)
Prints the time split (simulation, basis effects, contraction of 100 random bases) and the peak
resident memory above the post-import baseline, in units of one density matrix (16 * 4**k B).
"""

from __future__ import annotations

import resource
import subprocess
import sys
import time
from pathlib import Path

# the hand-built toy device is a test helper (tests/helpers/toy.py)
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))


def one(k: int) -> None:
    import numpy as np
    from helpers.toy import compile_toy, toy_circuit, toy_device

    from noiselab.emulate.channels import EffectCache
    from noiselab.emulate.contract import dm_distributions
    from noiselab.emulate.engine import (
        basis_tables,
        emulate_circuit_bases,
        simulate_density_matrix,
    )

    dev = toy_device(k)
    qc = compile_toy(toy_circuit(k, layers=2), dev)
    rng = np.random.default_rng(0)
    bases = ["".join(rng.choice(list("IXYZ"), k)) for _ in range(100)]
    base = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    t0 = time.perf_counter()
    emulate_circuit_bases(qc, dev.noise_model, bases, layer=dev.layer, method="density_matrix")
    total = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    t1 = time.perf_counter()
    rho = simulate_density_matrix(qc, dev.noise_model)
    t2 = time.perf_counter()
    effects, keys = basis_tables(bases, list(range(k)), EffectCache(dev.noise_model, k, dev.layer))
    t3, c3 = time.perf_counter(), time.process_time()
    dm_distributions(rho, list(range(k)), effects, keys)
    t4, c4 = time.perf_counter(), time.process_time()
    dm = 16 * 4**k
    print(
        f"{k:2d} qubits, {len(qc.data)} ops, 100 bases: total {total:.2f} s (simulation "
        f"{t2 - t1:.2f} s, effects {t3 - t2:.2f} s, contraction {t4 - t3:.2f} s, cpu "
        f"{c4 - c3:.2f} s); peak above baseline {(peak - base) / 2**20:.0f} MiB = "
        f"{(peak - base) / dm:.2f} density matrices"
    )


if __name__ == "__main__":
    if len(sys.argv) == 2:
        one(int(sys.argv[1]))
    else:
        for size in sys.argv[1:] or ["4", "8", "10", "12"]:
            subprocess.run([sys.executable, __file__, size], check=True)
