"""Peak memory of one trajectory emulation against noiselab.emulate.memory's estimate.

Run: python benchmarks/trajectory_memory.py 10 12   (each size and store in a fresh process)
Per size, two runs of the same circuit, 200 random bases, 64 trajectories in 8 batches: keeping
the per-batch distributions, and keeping per-batch values (20 masks per basis, identity and one
per-qubit transform). Prints the peak resident memory above the baseline taken just before the
emulation (inputs built, imports done) and the estimate without its fixed overhead.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

# the hand-built toy device is a test helper (tests/helpers/toy.py)
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

BASES = 200
MASKS = 20
TRAJECTORIES = 64
BATCHES = 8


def peak_rss_bytes() -> int:
    """VmHWM of this process (bytes)."""
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) * 1024
    raise RuntimeError("no VmHWM")


def reset_peak() -> None:
    """Reset VmHWM to the current resident size (Linux: write 5 to clear_refs)."""
    with open("/proc/self/clear_refs", "w") as fh:
        fh.write("5")


def one(k: int, store: str) -> dict:
    import time

    import numpy as np
    from helpers.toy import compile_toy, toy_circuit, toy_device

    from noiselab.emulate.batch_values import BatchValueSpec
    from noiselab.emulate.engine import emulate_circuit_bases
    from noiselab.emulate.memory import BASE_OVERHEAD_BYTES, estimate_memory_bytes

    dev = toy_device(k)
    qc = compile_toy(toy_circuit(k, layers=2), dev)
    rng = np.random.default_rng(0)
    bases = ["".join(rng.choice(list("XYZ"), k)) for _ in range(BASES)]
    spec = None
    if store == "values":
        masks = tuple(np.unique(rng.integers(1, 2**k, size=MASKS)).astype(np.uint64) for _ in bases)
        flip = np.array([[0.98, 0.03], [0.02, 0.97]])
        spec = BatchValueSpec(masks, (None, tuple(np.linalg.inv(flip) for _ in range(k))))
    mats = [np.array([[0.98, 0.03], [0.02, 0.97]])] * k
    reset_peak()
    base = peak_rss_bytes()
    t0 = time.perf_counter()
    emulate_circuit_bases(
        qc,
        dev.noise_model,
        bases,
        layer=dev.layer,
        method="trajectory",
        readout_matrices=mats,
        num_trajectories=TRAJECTORIES,
        num_batches=BATCHES,
        seed=1,
        batch_values=spec,
    )
    wall = time.perf_counter() - t0
    est = estimate_memory_bytes(
        k,
        "trajectory",
        trajectories_per_batch=TRAJECTORIES // BATCHES,
        num_bases=BASES,
        num_batches=BATCHES,
        num_values=-1 if spec is None else spec.num_values,
    )
    return {
        "qubits": k,
        "store": store,
        "peak_above_baseline_mib": (peak_rss_bytes() - base) / 2**20,
        "estimate_mib": (est - BASE_OVERHEAD_BYTES) / 2**20,
        "wall_s": wall,
    }


def main(argv: list[str]) -> int:
    if argv and argv[0] == "--one":
        print(json.dumps(one(int(argv[1]), argv[2])))
        return 0
    for k in [int(a) for a in argv] or [10, 12]:
        for store in ("distributions", "values"):
            out = subprocess.run(
                [sys.executable, __file__, "--one", str(k), store],
                check=True,
                capture_output=True,
                text=True,
            ).stdout.strip()
            r = json.loads(out.splitlines()[-1])
            ratio = r["peak_above_baseline_mib"] / r["estimate_mib"]
            print(
                f"{k} qubits, {store:13s}: peak {r['peak_above_baseline_mib']:8.1f} MiB, "
                f"estimate {r['estimate_mib']:8.1f} MiB, measured/estimate {ratio:.2f}, "
                f"{r['wall_s']:.1f} s"
            )
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
