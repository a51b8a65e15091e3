"""Trajectory runs that keep per-batch estimator values instead of per-batch distributions:
the Walsh values against an outside transform, every recipe of the demo equal on both stores,
the memory estimate of a 16-qubit study under the guard, and the one-line refusal of a recipe
that needs the distributions when they do not fit (before any simulation)."""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import numpy as np
import pytest
import yaml
from scipy.linalg import hadamard

from noiselab.cli.app import main
from noiselab.common.errors import NoiselabError
from noiselab.emulate.batch_values import BatchValueSpec, batch_functional, walsh
from noiselab.emulate.engine import engine_call_count
from noiselab.emulate.memory import MEMORY_LIMIT_ENV, estimate_memory_bytes
from noiselab.study.assess import demo_study_path, run_recipes
from noiselab.study.cache import CachingRunner
from noiselab.study.context import build_context, replace_experiment
from noiselab.study.spec import load_study


def _layout(spec: BatchValueSpec, n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    masks = np.concatenate(spec.masks).astype(np.uint64)
    counts = np.array([len(m) for m in spec.masks])
    return masks, counts, spec.transform_array(n)


def test_walsh_matches_scipy_hadamard() -> None:
    rng = np.random.default_rng(3)
    x = rng.random((3, 32))
    # source: scipy.linalg.hadamard (Sylvester order), H[m, k] = (-1)**popcount(m & k)
    assert np.allclose(walsh(x), x @ hadamard(32).T, atol=1e-12)


def test_batch_functional_equals_direct_dot_product() -> None:
    """u . p per batch from kept values equals the dot product on the distributions, for u in
    the span of the kept parities, directly or behind a per-qubit transform; u outside it is
    refused."""
    n, rng = 4, np.random.default_rng(5)
    batches = rng.dirichlet(np.ones(2**n), size=(6, 2))  # 6 batches, 2 bases
    masks = (np.array([1, 3, 12], dtype=np.uint64), np.array([5, 15], dtype=np.uint64))
    flips = [np.array([[0.97, 0.04], [0.03, 0.96]]) for _ in range(n)]
    inv = tuple(np.linalg.inv(a) for a in flips)
    spec = BatchValueSpec(masks, (None, inv))
    values = np.array([spec.reduce(b) for b in batches])
    layout = _layout(spec, n)
    k = np.arange(2**n)

    def parity(m: int) -> np.ndarray:  # textbook: Z-string eigenvalue on outcome k
        return 1.0 - 2.0 * np.array([bin(int(x) & m).count("1") % 2 for x in k])

    u = 0.3 * parity(3) - 1.2 * parity(12) + 0.1  # constant: the empty mask? not kept
    with pytest.raises(NoiselabError, match="per-batch values"):
        batch_functional(values, *layout, 0, u)
    u = 0.3 * parity(3) - 1.2 * parity(12)
    got = batch_functional(values, *layout, 0, u)
    assert np.allclose(got, batches[:, 0, :] @ u, atol=1e-12)
    # readout pullback A^-T u (what a per-qubit correction puts on the raw distribution)
    from noiselab.mitigate.passes.readout import apply_per_qubit

    v = apply_per_qubit([m.T for m in inv], 0.7 * parity(5) + 0.2 * parity(15))
    got = batch_functional(values, *layout, 1, v)
    assert np.allclose(got, batches[:, 1, :] @ v, atol=1e-12)


@pytest.fixture(scope="module")
def demo_trajectory_context():
    study = load_study(demo_study_path())
    emulation = study.emulation.model_copy(
        update={"method": "trajectory", "trajectories": 32, "batches": 4}
    )
    suppressed = {  # the suppression passes with the others they combine with
        "mt_readout": ({"pass": "measure_twirl"}, {"pass": "readout"}),
        "twirl_ps": ({"pass": "twirl"}, {"pass": "postselect", "mode": "discard"}),
        "decouple_zne": (
            {"pass": "decouple"},
            {"pass": "readout"},
            {"pass": "extrapolate", "amplifier": "stretch", "scales": [1, 2, 3], "fit": "linear"},
        ),
    }
    study = dataclasses.replace(study, emulation=emulation, recipes={**study.recipes, **suppressed})
    return study, build_context(study)


def test_values_store_equals_distribution_store(demo_trajectory_context) -> None:
    """Every demo recipe (raw, readout, discard and verify post-selection, extrapolation), and
    the suppression passes, give the same energy, standard error and trajectory error from
    either store (same seed)."""
    study, ctx = demo_trajectory_context
    assert ctx.experiment.trajectory_values  # chosen: every demo recipe reads parities only
    out = {}
    for keep in (False, True):
        exp = replace_experiment(ctx.experiment, trajectory_values=keep)
        c = dataclasses.replace(ctx, experiment=exp)
        runner = CachingRunner(exp)
        out[keep] = run_recipes(c, study.recipes, runner)
        run = runner(next(iter(runner._memory)))
        assert (run.trajectory_values is not None) == keep
        assert (run.trajectory_batches is not None) == (not keep)
    for name, a in out[False].items():
        b = out[True][name]
        assert math.isclose(a.energy_ha, b.energy_ha, rel_tol=0, abs_tol=1e-9), name
        assert math.isclose(a.std_mha, b.std_mha, rel_tol=1e-9), name
        ta, tb = a.details["trajectory_std_mha"], b.details["trajectory_std_mha"]
        assert ta > 0 and math.isclose(ta, tb, rel_tol=1e-9), name


def test_memory_estimate_of_a_16_qubit_study_is_under_the_guard() -> None:
    """An H8 chain (STO-3G, Jordan-Wigner, 16 qubits): its plan's bases at the defaults (256
    trajectories in 16 batches) fit a modest 8 GiB machine keeping per-batch values, not
    keeping per-batch distributions."""
    from noiselab.chem.sources import build_problem
    from noiselab.mitigate.batch_spec import value_masks
    from noiselab.mitigate.experiment import ExperimentContext
    from noiselab.mitigate.plan import build_plan

    root = Path(__file__).resolve().parents[1]
    study = load_study(root / "benchmarks" / "studies" / "hchain-16-traj.yaml")
    _, qp = build_problem(study.molecule, study.encoding, study.drop_fixed_parity_qubits)
    plan = build_plan(qp.hamiltonian, dense=False)
    ctx = ExperimentContext(
        problem=qp,
        compiled=None,
        profile=None,
        plan=plan,
        exact_energy_ha=0.0,
        ansatz_energy_ha=0.0,
        shots=10**6,
        verification_bases=False,
    )
    n, bases = 16, len(ctx.measured_bases)
    values = 2 * sum(len(m) for m in value_masks(ctx))
    common = {"trajectories_per_batch": 16, "num_bases": bases, "num_batches": 16}
    kept_values = estimate_memory_bytes(n, "trajectory", num_values=values, **common)
    kept_dists = estimate_memory_bytes(n, "trajectory", **common)
    assert kept_values < 8 * 2**30 < kept_dists, (bases, kept_values / 2**30, kept_dists / 2**30)


def _study_with(folder: Path, recipes: dict) -> Path:
    data = yaml.safe_load(demo_study_path().read_text(encoding="utf-8"))
    for key in ("tune", "sweep", "scan"):
        data.pop(key, None)
    data["device"] = str(
        Path(__file__).resolve().parents[1] / "configs" / "devices" / f"{data['device']}.yaml"
    )
    data["emulation"] = {"method": "trajectory", "trajectories": 32, "batches": 16}
    data["recipes"] = recipes
    p = folder / "h2-traj.yaml"
    p.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return p


def test_recipe_needing_distributions_refused_before_simulation(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    projected = [{"pass": "readout", "method": "nearest_probability"}]
    path = _study_with(tmp_path, {"raw": [], "projected": projected})
    ctx = build_context(load_study(path))
    assert not ctx.experiment.trajectory_values
    e = ctx.study.emulation
    need = estimate_memory_bytes(
        4,
        "trajectory",
        trajectories_per_batch=e.trajectories // e.batches,
        num_bases=len(ctx.experiment.measured_bases),
        num_batches=e.batches,
        num_qubits_measured=4,
    )
    monkeypatch.setenv(MEMORY_LIMIT_ENV, str(need - 1))  # distributions just do not fit
    calls = engine_call_count()

    def optimizer_ran(*args: object, **kwargs: object) -> None:
        raise AssertionError("the noiseless optimizer ran before the refusal")

    with monkeypatch.context() as patched:  # refused before the optimizer, too
        patched.setattr("noiselab.study.context.optimize", optimizer_ran)
        with pytest.raises(SystemExit) as info:
            main(["assess", str(path), "--no-cache", "--quiet", "--json"])
    out, err = capsys.readouterr()
    assert info.value.code == 2 and out == "" and "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert "recipes.projected" in lines[0] and "per-batch" in lines[0]
    assert "postselect" in lines[0] and "pauli_propagation" in lines[0]
    assert engine_call_count() == calls  # refused before any simulation
    # the same budget serves the recipes that keep per-batch values
    (tmp_path / "plain").mkdir()
    plain = _study_with(tmp_path / "plain", {"raw": [], "readout": [{"pass": "readout"}]})
    with pytest.raises(SystemExit) as info:
        main(["assess", str(plain), "--no-cache", "--quiet", "--json"])
    out, err = capsys.readouterr()
    assert info.value.code in (0, None), err
    assert '"trajectory_std_mha"' in out
