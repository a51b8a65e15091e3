"""Which bases a job measures: the symmetry-verification bases only when a recipe verifies."""

from __future__ import annotations

import dataclasses
from itertools import combinations
from pathlib import Path

import pytest
from qiskit.quantum_info import SparsePauliOp

import noiselab.study.assess as assess_mod
import noiselab.study.tune as tune_mod
from noiselab.common.errors import InputError
from noiselab.mitigate.recipe import run_recipe
from noiselab.study.assess import assess
from noiselab.study.cache import CachingRunner, ResultsCache
from noiselab.study.context import build_context
from noiselab.study.spec import load_study
from noiselab.study.tune import GridOverride, tune

CONFIGS = Path(__file__).resolve().parents[1] / "configs"


@pytest.fixture(scope="module")
def store(tmp_path_factory: pytest.TempPathFactory) -> ResultsCache:
    return ResultsCache(tmp_path_factory.mktemp("bases") / "cache.db")  # optimum computed once


@pytest.fixture(scope="module")
def studies(tmp_path_factory: pytest.TempPathFactory) -> tuple:
    """(a study with a verify recipe, the same without): the shipped LiH active space in
    Jordan-Wigner (6 qubits), where verification needs bases beyond the plan's (in H2 the
    plan's bases already suffice)."""
    text = (CONFIGS / "studies" / "lih-active-space.yaml").read_text()
    text = text.replace("encoding: parity", "encoding: jordan_wigner")
    text = text.replace("drop_fixed_parity_qubits: true", "drop_fixed_parity_qubits: false")
    path = tmp_path_factory.mktemp("study") / "lih-jw.yaml"
    path.write_text(text)
    plain = load_study(path)  # no recipe of it verifies
    verify = (
        {"pass": "readout", "method": "per_qubit_inverse"},
        {"pass": "postselect", "mode": "verify"},
    )
    full = dataclasses.replace(plain, recipes={**plain.recipes, "verify": verify})
    return full, plain


@pytest.fixture
def measured(monkeypatch: pytest.MonkeyPatch) -> list[tuple[str, ...]]:
    """The bases every job's runner measures (recorded as the runners are made)."""
    seen: list[tuple[str, ...]] = []

    class Recording(CachingRunner):
        def __init__(self, experiment, *args, **kwargs) -> None:
            seen.append(tuple(experiment.measured_bases))
            super().__init__(experiment, *args, **kwargs)

    monkeypatch.setattr(assess_mod, "CachingRunner", Recording)
    monkeypatch.setattr(tune_mod, "CachingRunner", Recording)
    return seen


def _measurable(term: str, basis: str) -> bool:
    return all(t in ("I", b) for t, b in zip(term, basis, strict=True))


def _verification_terms(qubit_problem) -> set[str]:
    """Pauli terms of H P and P for every subset of the symmetries, P = prod (1 + l S) / 2,
    composed with qiskit's operator algebra (source: qiskit.quantum_info.SparsePauliOp)."""
    n = qubit_problem.num_qubits
    syms = list(qubit_problem.symmetries)
    terms: set[str] = set()
    for r in range(1, len(syms) + 1):
        for subset in combinations(syms, r):
            p = SparsePauliOp("I" * n)
            for s in subset:
                p = p @ (SparsePauliOp("I" * n) + s.eigenvalue * s.pauli) * 0.5
            for op in (p.simplify(), (qubit_problem.hamiltonian @ p).simplify(atol=1e-12)):
                terms.update(op.paulis.to_labels())
    return terms


def _covers(bases: tuple[str, ...], terms: set[str]) -> bool:
    return all(any(_measurable(t, b) for b in bases) for t in terms)


def test_assess_without_verify_measures_only_the_plan(studies, store, measured) -> None:
    _, plain = studies
    result = assess(plain, cache=store, reuse=False)
    ctx = build_context(plain, cache=store)
    assert measured == [tuple(ctx.plan.bases)]
    assert not ctx.experiment.verification_bases
    assert all("extra_bases" not in r.details for r in result.recipes.values())
    # verification would need more than the plan's bases (else the test shows nothing)
    assert not _covers(tuple(ctx.plan.bases), _verification_terms(ctx.qubit_problem))


def test_assess_with_verify_measures_the_extra_bases(studies, store, measured) -> None:
    full, _ = studies
    result = assess(full, cache=store, reuse=False)
    ctx = build_context(full, cache=store)
    (bases,) = measured
    assert bases[: len(ctx.plan.bases)] == tuple(ctx.plan.bases)
    assert len(bases) > len(ctx.plan.bases)
    assert _covers(bases, _verification_terms(ctx.qubit_problem))
    assert result.recipes["verify"].details["extra_bases"]


def test_tune_measures_the_extra_bases_only_with_a_verify_axis(studies, store, measured) -> None:
    _, plain = studies
    ctx = build_context(plain, cache=store)
    small = {
        "readout": ["none"],
        "amplifier": ["none"],
        "family": ["none"],
        "suppress": ["none"],
    }
    tune(plain, grid=GridOverride(postselect=["none", "discard"], **small), cache=store)
    tuned = tune(plain, grid=GridOverride(postselect=["none", "verify"], **small), cache=store)
    # a context given without the verification bases is extended when the grid verifies
    again = tune(
        plain,
        grid=GridOverride(postselect=["verify"], **small),
        cache=store,
        context=ctx,
        reuse=False,
    )
    assert measured[0] == tuple(ctx.plan.bases)
    assert len(measured) == 3
    for bases in measured[1:]:
        assert _covers(bases, _verification_terms(ctx.qubit_problem))
    verified = {e.label: e.result for e in tuned.entries}["readout=none post=verify zne=none"]
    # the same estimate (up to the last bits: one run read the simulation from the cache)
    redone = again.entries[0].result
    assert redone.energy_ha == pytest.approx(verified.energy_ha, rel=1e-12, abs=1e-12)
    assert redone.std_mha == pytest.approx(verified.std_mha, rel=1e-9)


def test_verify_refused_without_the_bases(studies, store) -> None:
    _, plain = studies
    ctx = build_context(plain, cache=store)
    runner = CachingRunner(ctx.experiment, ResultsCache.disabled())
    with pytest.raises(InputError) as err:
        run_recipe([{"pass": "postselect", "mode": "verify"}], ctx.experiment, runner)
    message = str(err.value)
    assert "\n" not in message
    assert "recipe[0].mode" in message and "verification_bases" in message
