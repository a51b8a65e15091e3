"""assess / tune / demo on the smallest shipped H2 study, checked against PySCF and by hand."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from noiselab.common.units import CHEMICAL_ACCURACY_MHA
from noiselab.study.spec import load_study

ROOT = Path(__file__).resolve().parents[1]
H2 = ROOT / "configs" / "studies" / "h2-equilibrium.yaml"

REQUIRED_KEYS = {
    "study",
    "qubits",
    "exact_energy",
    "hartree_fock_energy",
    "ansatz_energy",
    "target_mha",
    "confidence",
    "recipes",
    "best_recipe",
}
RECIPE_KEYS = {
    "energy",
    "bias_mha",
    "std_mha",
    "shots",
    "p_within_target",
    "shots_needed",
    "limited_by",
}


def _cli_json(argv: list[str]) -> dict:
    """Run ``noiselab`` in-process; stdout must hold exactly one JSON object."""
    import contextlib
    import io

    from noiselab.cli.app import main

    out, err = io.StringIO(), io.StringIO()
    with (
        contextlib.redirect_stdout(out),
        contextlib.redirect_stderr(err),
        pytest.raises(SystemExit) as info,
    ):
        main(argv)
    assert info.value.code in (0, None), err.getvalue()
    return json.loads(out.getvalue())


@pytest.fixture(scope="module")
def study():
    return load_study(H2)


@pytest.fixture(scope="module")
def context(study):
    from noiselab.study.cache import ResultsCache
    from noiselab.study.context import build_context

    return build_context(study, cache=ResultsCache.disabled())


@pytest.fixture(scope="module")
def cli_runs(tmp_path_factory: pytest.TempPathFactory) -> dict:
    """assess --json twice with the same seed and different caches (PySCF and all)."""
    base = tmp_path_factory.mktemp("assess")
    out: dict = {}
    for tag in ("a", "b"):
        argv = ["assess", str(H2), "--json", "--seed", "11", "--cache", str(base / f"{tag}.db")]
        out[tag] = _cli_json(argv)
    out["cache_a"] = base / "a.db"
    return out


def test_assess_json_has_the_keys(cli_runs: dict) -> None:
    data = cli_runs["a"]
    assert set(data) >= REQUIRED_KEYS
    assert data["qubits"] == 4  # H2/STO-3G: 4 spin orbitals, Jordan-Wigner (Szabo & Ostlund)
    assert data["target_mha"] == pytest.approx(CHEMICAL_ACCURACY_MHA)
    assert data["confidence"] == 0.95
    assert "raw" in data["recipes"]
    for entry in data["recipes"].values():
        assert set(entry) >= RECIPE_KEYS
        if entry["limited_by"] == "bias":
            assert entry["shots_needed"] is None
    assert data["best_recipe"] in data["recipes"]


def test_exact_energy_is_pyscf_fci(cli_runs: dict) -> None:
    from pyscf import fci, gto, scf

    # source: PySCF FCI, computed here independently of noiselab's chem layer
    mol = gto.M(atom="H 0 0 0; H 0 0 0.735", basis="sto-3g", unit="Angstrom", verbose=0)
    mf = scf.RHF(mol).run()
    e_fci = fci.FCI(mf).kernel()[0]
    data = cli_runs["a"]
    assert data["exact_energy"] == pytest.approx(e_fci, abs=1e-8)
    assert data["hartree_fock_energy"] == pytest.approx(mf.e_tot, abs=1e-8)
    # Szabo & Ostlund (from memory): FCI about -1.137 Ha, RHF about -1.117 Ha near 1.4 bohr
    assert data["exact_energy"] == pytest.approx(-1.137, abs=2e-3)
    # two electrons: UCCSD's optimum equals FCI (REFERENCES.md, from memory)
    assert data["ansatz_energy"] == pytest.approx(e_fci, abs=1e-6)


def test_mitigation_reduces_the_bias(cli_runs: dict) -> None:
    recipes = cli_runs["a"]["recipes"]
    mitigated = [name for name in recipes if name != "raw"]
    assert mitigated
    raw_bias = abs(recipes["raw"]["bias_mha"])
    assert abs(recipes["zne_linear"]["bias_mha"]) < raw_bias
    # bias is energy - exact, in mHa: check the bookkeeping against the JSON's own energies
    exact = cli_runs["a"]["exact_energy"]
    for entry in recipes.values():
        assert entry["bias_mha"] == pytest.approx((entry["energy"] - exact) * 1000.0, abs=1e-6)


def test_probability_matches_normal_formula(cli_runs: dict) -> None:
    from scipy.stats import norm

    t = cli_runs["a"]["target_mha"]
    for entry in cli_runs["a"]["recipes"].values():
        b, s = entry["bias_mha"], entry["std_mha"]
        # Phi((t - b)/s) - Phi((-t - b)/s)  (REFERENCES.md, textbook normal distribution)
        expected = norm.cdf((t - b) / s) - norm.cdf((-t - b) / s)
        assert entry["p_within_target"] == pytest.approx(expected, abs=2e-3)


def test_best_recipe_rule(cli_runs: dict) -> None:
    recipes = cli_runs["a"]["recipes"]
    best = cli_runs["a"]["best_recipe"]
    top = max(r["p_within_target"] for r in recipes.values())
    assert recipes[best]["p_within_target"] == top


def test_same_seed_same_json_with_different_caches(cli_runs: dict) -> None:
    assert cli_runs["a"] == cli_runs["b"]


def test_second_assess_runs_no_simulation(cli_runs: dict) -> None:
    from noiselab.study.assess import assess
    from noiselab.study.cache import open_cache

    store = open_cache(cli_runs["cache_a"])
    # recomputed from the cached simulations (and cached noiseless optimum)
    result = assess(H2, cache=store, seed=11, reuse=False)
    assert result.stats.simulations == 0
    assert result.stats.cache_hits > 0
    assert result.to_json() == cli_runs["a"]
    # or the whole stored result of the identical earlier command
    reused = assess(H2, cache=store, seed=11)
    assert reused.stats.reused and reused.stats.simulations == 0
    assert reused.to_json() == cli_runs["a"]


def test_cache_keys_follow_what_is_simulated(study, context, tmp_path: Path) -> None:
    from noiselab.mitigate.variants import CircuitVariant
    from noiselab.mitigate.variants import stretched as make_stretched
    from noiselab.study.cache import CachingRunner, open_cache
    from noiselab.study.context import build_context

    store = open_cache(tmp_path / "s.db")
    base, stretched = CircuitVariant(), make_stretched(2.0)
    r1 = CachingRunner(context.experiment, store)
    # the same study prepared again (new qiskit circuit objects, new auto names): same keys
    again = build_context(study, cache=store)
    r2 = CachingRunner(again.experiment, store)
    assert r1.key(base) == r2.key(base)
    assert r1.key(stretched) == r2.key(stretched)
    # another noise level is another simulation
    assert r1.key(base) != r1.key(stretched)


def test_cached_distributions_round_trip(context, tmp_path: Path) -> None:
    from noiselab.mitigate.variants import CircuitVariant
    from noiselab.study.cache import CachingRunner, open_cache

    store = open_cache(tmp_path / "r.db")
    first = CachingRunner(context.experiment, store)
    d1 = first(CircuitVariant())
    second = CachingRunner(context.experiment, store)
    d2 = second(CircuitVariant())
    assert first.simulations == 1 and second.simulations == 0 and second.cache_hits == 1
    assert d2.bases == d1.bases
    np.testing.assert_array_equal(d2.probs, d1.probs)
    np.testing.assert_array_equal(d2.probs_ideal, d1.probs_ideal)
    # a probability vector per basis (common practice, no source)
    np.testing.assert_allclose(d2.probs.sum(axis=1), 1.0, atol=1e-9)


def test_tune_simulates_each_distinct_variant_once(study, context, tmp_path: Path) -> None:
    from noiselab.study.tune import GridOverride, tune

    grid = GridOverride(
        readout=["none", "per_qubit_inverse"],
        postselect=["none", "discard"],
        amplifier=["none", "stretch"],
        scales=[[1, 2, 3], [1, 3, 5]],
        fit=["linear", "richardson"],
        suppress=["none"],
    )
    result = tune(study, grid=grid, cache=tmp_path / "t.db", context=context)
    # 2 readout x 2 post-selection x (no ZNE + 2 scale sets x 2 fits) = 20 settings (by hand)
    assert len(result.entries) == 20
    # distinct circuits: the device as it is plus stretch factors 2, 3, 5 = 4 (by hand)
    assert result.distinct_variants == 4
    assert result.stats.simulations == 4
    ranks = [(-e.result.p_within_target) for e in result.entries]
    assert ranks == sorted(ranks)
    # a second tune over the same grid needs no simulation at all
    again = tune(study, grid=grid, cache=tmp_path / "t.db", context=context)
    assert again.stats.simulations == 0
    assert [e.label for e in again.entries] == [e.label for e in result.entries]


def test_tune_default_grid_is_large(study) -> None:
    from noiselab.study.tune import GridOverride, grid_settings, resolve_grid

    bare = study.__class__(**{**study.__dict__, "tune": None})
    grid, _ = resolve_grid(bare, GridOverride())
    settings, _ = grid_settings(grid)
    assert len(settings) >= 50
    assert len({s.label for s in settings}) == len(settings)


def test_tune_refuses_unknown_axis_value(study) -> None:
    from noiselab.common.errors import InputError
    from noiselab.study.tune import GridOverride, resolve_grid

    # from Python the message names the argument, not the command line's option
    with pytest.raises(InputError, match=r"^fit: unknown value 'cubic'"):
        resolve_grid(study, GridOverride(fit=["cubic"]))


def test_assess_out_writes_files(cli_runs: dict, tmp_path: Path, capsys) -> None:
    from noiselab.cli.app import main

    out = tmp_path / "out"
    with pytest.raises(SystemExit) as info:
        main(
            [
                "assess",
                str(H2),
                "--seed",
                "11",
                "--cache",
                str(cli_runs["cache_a"]),
                "--out",
                str(out),
                "--quiet",
            ]
        )
    text, err = capsys.readouterr()
    assert info.value.code in (0, None), err
    assert "Verdict:" in text and "only as good as the device noise model" in text
    written = json.loads((out / "assess.json").read_text())
    # the file adds its provenance block (date, machine, inputs' sha256) to the job's JSON
    assert written.pop("provenance")["files"]["study"]["sha256"]
    assert written == cli_runs["a"]
    header = (out / "assess.csv").read_text().splitlines()[0]
    assert header.startswith("recipe,energy_ha,bias_mha")
    assert (out / "assess-bias.png").stat().st_size > 1000
    assert not list(out.glob(".*.tmp*"))  # atomic writes leave no temporary files


def test_tune_cli_writes_ranked_csv(cli_runs: dict, tmp_path: Path) -> None:
    import csv
    import io

    argv = [
        "tune",
        str(H2),
        "--readout",
        "none",
        "--readout",
        "per_qubit_inverse",
        "--postselect",
        "discard",
        "--amplifier",
        "stretch",
        "--scales",
        "1,3,5",
        "--fit",
        "linear",
        "--fit",
        "richardson",
        "--suppress",
        "none",
        "--cache",
        str(cli_runs["cache_a"]),
        "--seed",
        "11",
        "--out",
        str(tmp_path),
        "--json",
    ]
    data = _cli_json(argv)
    assert data["settings"] == 4  # 2 readout x 1 x 1 x 1 scale set x 2 fits (by hand)
    rows = list(csv.DictReader(io.StringIO((tmp_path / "tune.csv").read_text())))
    assert [int(r["rank"]) for r in rows] == [1, 2, 3, 4]
    p = [float(r["p_within_target"]) for r in rows]
    assert p == sorted(p, reverse=True)
    assert rows[0]["setting"] == data["ranking"][0]["setting"]


def test_demo_writes_its_files(cli_runs: dict, tmp_path: Path) -> None:
    import contextlib
    import io

    from noiselab.cli.app import main

    out, err = io.StringIO(), io.StringIO()
    target = tmp_path / "demo"
    with (
        contextlib.redirect_stdout(out),
        contextlib.redirect_stderr(err),
        pytest.raises(SystemExit) as info,
    ):
        main(["demo", "--out", str(target), "--cache", str(cli_runs["cache_a"])])
    assert info.value.code in (0, None), err.getvalue()
    text = out.getvalue()
    assert "Verdict:" in text and str(target.resolve()) in text
    assert json.loads((target / "assess.json").read_text())["study"] == "h2-equilibrium"
    assert (target / "assess.csv").is_file()
    assert "ETA" not in err.getvalue()  # no progress bars when stderr is not a terminal


def test_exact_spin_and_optimizer_are_reported(cli_runs: dict) -> None:
    data = cli_runs["a"]
    # source: PySCF fci spin_square of the H2 ground state is 0 (tests/test_chem_spin.py)
    assert abs(data["exact_spin_squared"]) < 1e-10
    assert abs(data["ansatz_spin_squared"]) < 1e-6
    assert data["optimizer"]["starts"] >= 1 and data["optimizer"]["stopped"] == "reached_exact"
    assert data["warnings"] == [] and "Caveat" not in data["verdict"]
