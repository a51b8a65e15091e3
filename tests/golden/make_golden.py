"""Golden JSON of the shipped studies: what the study jobs give today, to pin behaviour.

Computes, through the public Python API (``noiselab.assess`` / ``tune`` / ``sweep``) with the
studies' fixed seeds and an isolated temporary results cache:

- ``assess`` on every study in ``configs/studies/*.yaml`` -> ``assess-<study>.json``;
- ``tune`` on the demo study (h2-equilibrium) -> ``tune-h2-equilibrium.json``;
- ``sweep`` of the demo study over the two-qubit gate error, 3 points ->
  ``sweep-h2-equilibrium-two_qubit_error.json``.

Only volatile fields are dropped (run statistics and timings, file paths); everything else is
kept as the jobs write it. ``tests/test_golden.py`` recomputes these and compares.

The script always runs single-threaded with a fixed hash seed and without NOISELAB_* overrides
(it re-executes itself so if needed): with several OpenMP threads the noiseless optimum of the
LiH study differs between processes in its last digits, and the compiled circuit (depth 85-87)
and every energy after it differ with it.

Regenerate deliberately (only when a change of values is intended), from the repository root:

    PYTHONPATH=$PWD python tests/golden/make_golden.py

and commit the new files with a message that says why the values changed.
``--out DIR`` writes the files into DIR instead (what the test does).
"""

from __future__ import annotations

import json
import os
import platform
import sys
import tempfile
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[2]
GOLDEN_DIR = Path(__file__).resolve().parent
STUDIES = ROOT / "configs" / "studies"
DEMO = "h2-equilibrium"
SWEEP_KNOB = "two_qubit_error"
SWEEP_POINTS = 3

#: Environment the computation runs in (threads: see the module docstring).
PINNED_ENV = {
    "OMP_NUM_THREADS": "1",
    "OPENBLAS_NUM_THREADS": "1",
    "MKL_NUM_THREADS": "1",
    "PYTHONHASHSEED": "0",
}
if platform.machine() in ("x86_64", "AMD64"):
    # OpenBLAS picks its kernels by CPU; the transpiler's synthesis (through numpy/scipy linear
    # algebra) then compiles the stretched-H2 circuit to 39 two-qubit gates on one x86 CPU and
    # to 34 on another, whatever the seed. One kernel set for every x86 machine (AVX2, which all
    # current x86 server CPUs have) makes the golden numbers machine-independent.
    PINNED_ENV["OPENBLAS_CORETYPE"] = "Haswell"

#: Keys dropped wherever they appear: timings, file paths and the provenance block (date,
#: machine, library versions: vary by machine and checkout).
VOLATILE_KEYS = frozenset(
    {"source", "device_source", "run", "engine_seconds", "wall_seconds", "provenance"}
)


def strip_volatile(obj: Any) -> Any:
    """``obj`` without the volatile keys, at any depth."""
    if isinstance(obj, dict):
        return {k: strip_volatile(v) for k, v in obj.items() if k not in VOLATILE_KEYS}
    if isinstance(obj, list | tuple):
        return [strip_volatile(v) for v in obj]
    return obj


#: The shipped studies the golden files pin (those of the refactor they were made for; studies
#: shipped later are pinned by their own tests, e.g. h2-idle-line by test_mitigate_suppression).
GOLDEN_STUDIES = ("h2-equilibrium", "h2-stretched", "lih-active-space")


def study_paths() -> list[Path]:
    """The pinned shipped studies, sorted by name."""
    return [STUDIES / f"{name}.yaml" for name in sorted(GOLDEN_STUDIES)]


def compute_goldens(cache_dir: Path) -> dict[str, Any]:
    """File name -> golden JSON object, computed with a results cache in ``cache_dir``."""
    import noiselab
    from noiselab.study.cache import open_cache

    cache = open_cache(Path(cache_dir) / "golden-cache.sqlite")
    out: dict[str, Any] = {}
    for path in study_paths():
        result = noiselab.assess(path, cache=cache, reuse=False)
        out[f"assess-{path.stem}.json"] = strip_volatile(result.to_json())
    demo = STUDIES / f"{DEMO}.yaml"
    tuned = noiselab.tune(demo, cache=cache, reuse=False, workers=1)
    out[f"tune-{DEMO}.json"] = strip_volatile(tuned.to_json())
    swept = noiselab.sweep(demo, SWEEP_KNOB, points=SWEEP_POINTS, cache=cache, workers=1)
    out[f"sweep-{DEMO}-{SWEEP_KNOB}.json"] = strip_volatile(swept.to_json())
    return out


def dump(obj: Any) -> str:
    """The text a golden file holds (sorted keys, full float precision)."""
    return json.dumps(obj, indent=1, sort_keys=True) + "\n"


def pinned_environment(env: dict[str, str]) -> dict[str, str]:
    """``env`` with the pinned values and without noiselab's own overrides."""
    out = {k: v for k, v in env.items() if not k.startswith("NOISELAB_")}
    out.update(PINNED_ENV)
    paths = [p for p in env.get("PYTHONPATH", "").split(os.pathsep) if p]
    if str(ROOT) not in paths:
        paths.insert(0, str(ROOT))
    out["PYTHONPATH"] = os.pathsep.join(paths)
    return out


def main(argv: list[str]) -> int:
    env = pinned_environment(dict(os.environ))
    if env != dict(os.environ):  # once: the pinned environment is a fixed point
        os.execve(sys.executable, [sys.executable, __file__, *argv], env)
    out = GOLDEN_DIR
    if argv[:1] == ["--out"] and len(argv) == 2:
        out = Path(argv[1])
    elif argv:
        print("usage: make_golden.py [--out DIR]", file=sys.stderr)
        return 2
    with tempfile.TemporaryDirectory(prefix="noiselab-golden-") as tmp:
        goldens = compute_goldens(Path(tmp))
    for name, obj in goldens.items():
        (out / name).write_text(dump(obj))
        print(f"wrote {out / name}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
