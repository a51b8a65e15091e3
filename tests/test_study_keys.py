"""``noiselab study keys`` lists every key the models accept; ``study check`` validates a study
without running it and refuses a bad one with the same line as ``assess``."""

from __future__ import annotations

import re
import typing
from pathlib import Path

import pytest
from pydantic import BaseModel

from noiselab.chem.molecule import ActiveSpace, MoleculeSpec
from noiselab.device import profile as prof
from noiselab.mitigate.optimizers import (
    CobylaOptions,
    NelderMeadOptions,
    ParameterShiftOptions,
    SpsaOptions,
)
from noiselab.mitigate.registry import PASSES
from noiselab.study import keys as keymod
from noiselab.study.rehearse_spec import RehearseGrid, RehearseSettings
from noiselab.study.scan import ScanSection
from noiselab.study.spec import (
    CompileOptions,
    EmulationSettings,
    LayeredAnsatz,
    StudyFile,
    SweepDefaults,
    TruncationSettings,
    TuneGrid,
    UccsdAnsatz,
)

ROOT = Path(__file__).resolve().parents[1]
PAGE = ROOT / "docs" / "study-keys.md"
STUDIES = sorted((ROOT / "configs" / "studies").glob("*.yaml"))
BAD = sorted((ROOT / "tests" / "data" / "bad_studies").glob("*.yaml"))

# Where each model's keys sit in a file: written out by hand here, apart from the walker.
STUDY_MODELS: list[tuple[str, type[BaseModel]]] = [
    ("", StudyFile),
    ("molecule", MoleculeSpec),
    ("molecule.active_space", ActiveSpace),
    ("ansatz", UccsdAnsatz),
    ("ansatz", LayeredAnsatz),
    ("compile", CompileOptions),
    ("tune", TuneGrid),
    ("sweep", SweepDefaults),
    ("scan", ScanSection),
    ("emulation", EmulationSettings),
    ("emulation.truncation", TruncationSettings),
    ("rehearse", RehearseSettings),
    ("rehearse.grid", RehearseGrid),
    ("rehearse.spsa", SpsaOptions),
    ("rehearse.parameter_shift", ParameterShiftOptions),
    ("rehearse.cobyla", CobylaOptions),
    ("rehearse.nelder_mead", NelderMeadOptions),
    *[("recipes.<name>[i]", cls.Options) for cls in PASSES.values()],
    *[("rehearse.loop_recipe[i]", cls.Options) for cls in PASSES.values()],
]
PROFILE_MODELS: list[tuple[str, type[BaseModel]]] = [
    ("", prof.DeviceProfile),
    ("native_gates", prof.NativeGates),
    ("durations", prof.Durations),
    ("qubits", prof.QubitSection),
    ("qubits.default", prof.QubitValues),
    ("qubits.overrides.<qubit>", prof.QubitOverride),
    ("couplers", prof.PairSection),
    ("couplers.default", prof.PairValues),
    ("couplers.overrides[i]", prof.PairOverride),
    ("readout_crosstalk[i]", prof.CrosstalkEntry),
    ("drift", prof.DriftSpec),
]


def _expected_paths(models: list[tuple[str, type[BaseModel]]]) -> set[str]:
    return {f"{p}.{n}" if p else n for p, m in models for n in m.model_fields}


def _paths(rows: tuple[keymod.KeyInfo, ...]) -> set[str]:
    return {r.path for r in rows}


def test_every_model_key_is_listed_and_nothing_else() -> None:
    study, profile = _paths(keymod.study_keys()), _paths(keymod.profile_keys())
    assert _expected_paths(STUDY_MODELS) - study == set()
    assert _expected_paths(PROFILE_MODELS) - profile == set()
    # the only rows beyond the model fields: the recipe entry and each entry's pass name
    extra = study - _expected_paths(STUDY_MODELS)
    assert extra == {"recipes.<name>", "recipes.<name>[i].pass", "rehearse.loop_recipe[i].pass"}
    assert profile - _expected_paths(PROFILE_MODELS) == set()


def test_required_defaults_and_literal_values_match_the_models() -> None:
    rows = {(r.path, r.applies): r for r in (*keymod.study_keys(), *keymod.profile_keys())}
    checked = 0
    for models in (STUDY_MODELS, PROFILE_MODELS):
        for prefix, model in models:
            for name, field in model.model_fields.items():
                path = f"{prefix}.{name}" if prefix else name
                found = [r for (p, _), r in rows.items() if p == path]
                assert found, path
                required = {r.default == keymod.REQUIRED for r in found}
                if model in (UccsdAnsatz, LayeredAnsatz) or "Options" in model.__name__:
                    continue  # one row per kind/pass: compared below through ``applies``
                assert required == {field.is_required()}, path
                literal = [
                    a
                    for a in typing.get_args(field.annotation)
                    if typing.get_origin(field.annotation) is typing.Literal
                ]
                for value in literal:
                    assert all(str(value) in r.allowed for r in found), (path, value)
                checked += 1
    assert checked > 80


def test_pass_options_rows_carry_their_pass_and_default() -> None:
    rows = [r for r in keymod.study_keys() if r.path.startswith("recipes.<name>[i].")]
    for name, cls in PASSES.items():
        own = {r.name: r for r in rows if r.applies == f"pass {name}"}
        assert set(own) == set(cls.Options.model_fields), name
        for option, field in cls.Options.model_fields.items():
            assert (own[option].default == keymod.REQUIRED) == field.is_required()


def test_every_key_has_a_meaning_and_no_lookup_entry_is_stale() -> None:
    rows = (*keymod.study_keys(), *keymod.profile_keys())
    assert [r.path for r in rows if not r.meaning] == []
    used = keymod.lookup_keys_used()
    stale = [k for k in (*keymod.MEANINGS, *keymod.ALLOWED, *keymod.UNITS) if k not in used]
    assert stale == []


def test_units_follow_the_key_names() -> None:
    rows = {r.path: r for r in (*keymod.study_keys(), *keymod.profile_keys())}
    assert rows["target_mha"].unit == "mHa"
    assert rows["qubits.default.t1_us"].unit == "us"
    assert rows["durations.two_qubit_ns"].unit == "ns"
    assert rows["couplers.default.zz_angle_rad"].unit == "rad"


def test_reference_page_is_in_sync() -> None:
    assert PAGE.read_text(encoding="utf-8") == keymod.keys_markdown(), (
        "docs/study-keys.md is stale: regenerate with "
        "`noiselab study keys --markdown > docs/study-keys.md`"
    )


def _main(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    from noiselab.cli.app import main

    with pytest.raises(SystemExit) as info:
        main(argv)
    out, err = capsys.readouterr()
    return int(info.value.code or 0), out, err


def test_keys_command_prints_every_key(capsys: pytest.CaptureFixture[str]) -> None:
    rc, out, _ = _main(["study", "keys"], capsys)
    assert rc == 0
    for row in (*keymod.study_keys(), *keymod.profile_keys()):
        assert row.path in out
    rc, out, _ = _main(["study", "keys", "--markdown"], capsys)
    assert rc == 0 and out == keymod.keys_markdown()
    rc, _, err = _main(["study", "keys", "--which", "device"], capsys)
    assert rc == 2 and "--which" in err and "study, profile, both" in err


@pytest.mark.parametrize("path", STUDIES, ids=[p.stem for p in STUDIES])
def test_check_accepts_each_shipped_study(path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    rc, out, err = _main(["study", "check", str(path)], capsys)
    assert rc == 0, err
    assert out.startswith("ok: study ")
    for word in (
        "molecule:",
        "qubits:",
        "device:",
        "patch:",
        "budget:",
        "recipes (",
        "memory:",
        "time:",
    ):
        assert word in out


def test_check_counts_the_demo_simulations(capsys: pytest.CaptureFixture[str]) -> None:
    # the demo's recipes need the device as it is and stretch scales 2, 3 and 5: 4 simulations
    # (README: "4 for the assessed compile")
    from noiselab.study.check import describe_study
    from noiselab.study.spec import load_study

    outline = describe_study(load_study(ROOT / "configs" / "studies" / "h2-equilibrium.yaml"))
    assert outline.variants == 4


def _expected(path: Path) -> str:
    first = path.read_text(encoding="utf-8").splitlines()[0]
    return first.removeprefix("# expect: ").strip()


def _steady(text: str) -> str:
    """The message without the free memory of the moment (it changes between two runs)."""
    return re.sub(r"[0-9.]+ ?(GiB|%)", "N", text)


@pytest.mark.parametrize("path", BAD, ids=[p.stem for p in BAD])
def test_check_refuses_the_bad_corpus(path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    rc, out, err = _main(["study", "check", str(path)], capsys)
    assert rc == 2 and out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in err
    assert str(path) in lines[0] and _expected(path) in lines[0]


# every 8th file of the corpus also through assess (both read the study with load_study)
SAME = BAD[::8]


@pytest.mark.parametrize("path", SAME, ids=[p.stem for p in SAME])
def test_check_refuses_like_assess(path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    rc, _, err = _main(["study", "check", str(path)], capsys)
    rc_assess, _, err_assess = _main(["assess", str(path), "--no-cache", "--quiet"], capsys)
    assert rc == rc_assess == 2
    assert _steady(err) == _steady(err_assess)


def test_listed_tune_values_are_the_ones_the_grid_accepts() -> None:
    from noiselab.common.errors import InputError
    from noiselab.study.grid import check_tune_section

    rows = {r.path: r for r in keymod.study_keys()}
    for axis in ("readout", "postselect", "amplifier", "fit", "family"):
        listed = [v.strip() for v in rows[f"tune.{axis}"].allowed.split(",")]
        for value in listed:
            check_tune_section(TuneGrid(**{axis: [value]}), "s.yaml")  # accepted
        with pytest.raises(InputError, match="allowed"):
            check_tune_section(TuneGrid(**{axis: ["no-such-value"]}), "s.yaml")
    # the tune grid fits no polynomial (it has no degree axis): the reference must not list it
    assert "polynomial" not in rows["tune.fit"].allowed


def test_check_handles_passes_whose_circuits_need_the_compile(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    study = tmp_path / "s.yaml"
    study.write_text(
        "name: s\nmolecule: {geometry: 'H 0 0 0; H 0 0 0.735'}\nansatz: {kind: uccsd}\n"
        "device: cobaltgrid-12\nshots: 1e6\nrecipes:\n  raw: []\n"
        "  cdr: [{pass: clifford_regression}]\n  dist: [{pass: distillation}]\n",
        encoding="utf-8",
    )
    rc, out, err = _main(["study", "check", str(study)], capsys)
    assert rc == 0, err
    assert "cdr: clifford_regression" in out and "known once compiled" in out
    assert "work: at least" in out and "twice the qubits" in out
