"""Child process of the memory benchmark: print one JSON line with this process's peak RSS.

python benchmarks/memory_child.py baseline          # imports only
python benchmarks/memory_child.py assess STUDY.yaml # a full assess, no cache
"""

from __future__ import annotations

import json
import resource
import sys
import time


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
        assess_module.assess(argv[1], cache=False)
        wall = time.perf_counter() - t
    elif argv[0] != "baseline":
        raise SystemExit("usage: memory_child.py baseline | assess STUDY")
    # Linux reports ru_maxrss in KiB
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    print(json.dumps({"mode": argv[0], "maxrss_bytes": peak, "wall_s": wall}))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
