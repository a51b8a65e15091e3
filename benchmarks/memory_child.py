"""Child process of the memory benchmark: print one JSON line with this process's peak RSS.

python benchmarks/memory_child.py baseline          # imports only
python benchmarks/memory_child.py assess STUDY.yaml # a full assess, no cache
python benchmarks/memory_child.py assess STUDY.yaml trajectory   # ... with that method
"""

from __future__ import annotations

import json
import resource
import sys
import time


def peak_rss_bytes() -> int:
    """Peak resident memory of this process (bytes).

    /proc/self/status VmHWM belongs to this program's own address space; ru_maxrss would also
    carry the parent's peak over fork + exec (Linux keeps the larger of the two).
    """
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024  # KiB on Linux


def main(argv: list[str]) -> int:
    import numpy  # noqa: F401
    import pyscf  # noqa: F401
    import qiskit  # noqa: F401
    import qiskit_aer  # noqa: F401
    import scipy  # noqa: F401

    from noiselab.study import assess as assess_module

    wall = 0.0
    if argv[0] == "assess":
        t = time.perf_counter()
        method = argv[2] if len(argv) > 2 else None
        assess_module.assess(argv[1], cache=False, method=method)
        wall = time.perf_counter() - t
    elif argv[0] != "baseline":
        raise SystemExit("usage: memory_child.py baseline | assess STUDY [METHOD]")
    print(json.dumps({"mode": argv[0], "maxrss_bytes": peak_rss_bytes(), "wall_s": wall}))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
