"""Hostile input: special files, strict YAML, counts in any notation, command-line bounds,
unusable --out folders, damaged caches, the memory guard before any work, typo warnings."""

from __future__ import annotations

import contextlib
import json
import os
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest
from helpers.cli import run_main

from noiselab.common.counts import whole_number
from noiselab.common.errors import InputError, ProblemTooLargeError, quote
from noiselab.common.reading import read_input_bytes
from noiselab.common.yamlio import MAX_ALIAS_NODES, parse_yaml_mapping

ROOT = Path(__file__).resolve().parents[1]
H2 = ROOT / "configs" / "studies" / "h2-equilibrium.yaml"
DEVICE = ROOT / "configs" / "devices" / "cobaltgrid-12.yaml"
BAD_PROFILES = sorted((ROOT / "tests" / "data" / "bad_profiles").glob("*.yaml"))

# H2 / STO-3G, parity with the two-qubit reduction: 2 qubits (REFERENCES.md); invented chip
TINY_STUDY = """\
name: h2-tiny-hardening
molecule:
  geometry: "H 0 0 0; H 0 0 0.735"
  basis: sto-3g
encoding: parity
drop_fixed_parity_qubits: true
ansatz: {kind: uccsd}
device: DEVICE
shots: 1.0e+5
seed: 3
recipes:
  raw: []
"""


def run_cli(args: list[str], cwd: Path | None = None) -> subprocess.CompletedProcess[str]:
    """``python -m noiselab args`` in a subprocess (a hang fails through the timeout)."""
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.run(
        [sys.executable, "-m", "noiselab", *args],
        capture_output=True,
        text=True,
        timeout=120,
        cwd=cwd,
        env=env,
    )


def assert_one_line_refusal(code: int, err: str, *needles: str) -> None:
    lines = err.strip().splitlines()
    assert code == 2, err
    assert len(lines) == 1, err
    assert "Traceback" not in err and "internal error" not in err
    for needle in needles:
        assert needle in lines[0], lines[0]


@pytest.fixture(scope="module")
def tiny_study(tmp_path_factory: pytest.TempPathFactory) -> Path:
    p = tmp_path_factory.mktemp("tiny") / "h2-tiny.yaml"
    p.write_text(TINY_STUDY.replace("DEVICE", str(DEVICE)), encoding="utf-8")
    return p


# ---------------------------------------------------------------- bounded reading


def test_reader_refuses_special_files(tmp_path: Path) -> None:
    fifo = tmp_path / "pipe.yaml"
    os.mkfifo(fifo)  # nobody writes: opening it for reading would block
    link = tmp_path / "zero.yaml"
    link.symlink_to("/dev/zero")  # never ends
    with pytest.raises(InputError, match="named pipe"):
        read_input_bytes(fifo)
    with pytest.raises(InputError, match="character device") as info:
        read_input_bytes(link)
    assert "/dev/zero" in str(info.value)
    with pytest.raises(InputError, match="directory"):
        read_input_bytes(tmp_path)
    with pytest.raises(InputError, match="not found"):
        read_input_bytes(tmp_path / "missing.yaml")


def test_reader_caps_the_size(tmp_path: Path) -> None:
    big = tmp_path / "big.yaml"
    big.write_bytes(b"a" * 1001)
    with pytest.raises(InputError, match="at most 1000 bytes"):
        read_input_bytes(big, limit=1000)
    assert read_input_bytes(big, limit=1001) == b"a" * 1001


@pytest.mark.parametrize("target", ["fifo", "dev-zero"])
@pytest.mark.parametrize("role", ["profile", "study", "device"])
def test_cli_refuses_special_files(role: str, target: str, tmp_path: Path) -> None:
    special = tmp_path / "special.yaml"
    if target == "fifo":
        os.mkfifo(special)
    else:
        special.symlink_to("/dev/zero")
    if role == "profile":
        args = ["profile", "check", str(special)]
    elif role == "study":
        args = ["assess", str(special), "--no-cache"]
    else:
        study = tmp_path / "study.yaml"
        study.write_text(TINY_STUDY.replace("DEVICE", str(special)), encoding="utf-8")
        args = ["assess", str(study), "--cache", str(tmp_path / "c.sqlite")]
    if role != "device":  # one subprocess per role (the in-process path is the same code)
        proc = run_cli(args)
        assert_one_line_refusal(proc.returncode, proc.stderr, "special.yaml")
    else:
        code, _, err = run_main(args)
        assert_one_line_refusal(code, err, "device", "not a regular file")


# ---------------------------------------------------------------- strict YAML


def test_duplicate_keys_are_refused_with_both_lines() -> None:
    with pytest.raises(InputError) as info:
        parse_yaml_mapping("name: a\nshots: 10\ndevice: x.yaml\ndevice: y.yaml\n", "s.yaml")
    assert "key 'device' appears twice (lines 3 and 4)" in str(info.value)
    with pytest.raises(InputError, match="'gate_error' appears twice"):
        parse_yaml_mapping("c:\n  default: {gate_error: 0.01, gate_error: 0.02}\n", "p.yaml")
    # a merge key may be overridden: that is no duplicate
    data = parse_yaml_mapping("a: &x {k: 1, j: 2}\nb: {<<: *x, k: 3}\n", "m.yaml")
    assert data["b"] == {"k": 3, "j": 2}


def test_alias_bomb_is_refused_before_expansion() -> None:
    levels = ["l0: &l0 [x, x, x, x, x, x, x, x, x]"]
    levels += [f"l{i}: &l{i} [" + ", ".join([f"*l{i - 1}"] * 9) + "]" for i in range(1, 10)]
    text = "\n".join(levels) + "\n"
    assert len(text) < 3000  # a few kB that would expand to 9**10 items
    with pytest.raises(InputError) as info:
        parse_yaml_mapping(text, "bomb.yaml")
    assert "aliases" in str(info.value) and str(MAX_ALIAS_NODES) in str(info.value)
    with pytest.raises(InputError, match="recursive alias"):
        parse_yaml_mapping("a: &a [*a]\n", "loop.yaml")
    ok = parse_yaml_mapping("a: &a [1, 2]\nb: [*a, *a]\n", "fine.yaml")
    assert ok["b"] == [[1, 2], [1, 2]]


def test_messages_quote_values_short() -> None:
    text = quote("x" * 100_000)
    assert len(text) < 100 and "100000 characters" in text
    err = InputError("f.yaml: key: " + "y" * 10_000 + "; allowed: something")
    assert len(str(err)) <= 600 and str(err).endswith("allowed: something")


# ---------------------------------------------------------------- counts


@pytest.mark.parametrize(
    ("value", "expected"),
    [(1000000, 10**6), ("1e6", 10**6), (1.0e6, 10**6), ("1.0e+6", 10**6), ("1_000", 1000)],
)
def test_whole_numbers_in_any_notation(value: object, expected: int) -> None:
    assert whole_number(value) == expected


@pytest.mark.parametrize("value", [2.5, "2.5", "1e-3", True, "nan", float("inf"), "ten", "1e99"])
def test_not_whole_numbers_are_refused(value: object) -> None:
    with pytest.raises(ValueError):
        whole_number(value)


def test_yaml_scientific_shots(tiny_study: Path, tmp_path: Path) -> None:
    from noiselab.study.spec import load_study

    assert load_study(tiny_study).shots == 100_000  # shots: 1.0e+5 (YAML reads a float)
    text = tiny_study.read_text(encoding="utf-8")
    for literal, ok in (("1e5", True), ("'1e5'", True), ("2.5e4", True), ("2.5", False)):
        p = tmp_path / f"s-{ok}.yaml"
        p.write_text(text.replace("shots: 1.0e+5", f"shots: {literal}"), encoding="utf-8")
        if ok:
            assert load_study(p).shots == int(float(literal.strip("'")))
        else:
            with pytest.raises(InputError, match="shots"):
                load_study(p)


# ---------------------------------------------------------------- command-line overrides


def test_shots_in_scientific_notation_on_the_command_line(tiny_study: Path, tmp_path: Path):
    code, out, err = run_main(
        ["assess", str(tiny_study), "--shots", "1e6", "--json", "--cache", str(tmp_path / "c")]
    )
    assert code == 0, err
    import json

    assert json.loads(out)["shots_budget"] == 1_000_000


@pytest.mark.parametrize(
    ("args", "needles"),
    [
        (["assess", "--shots", "2.5"], ["--shots", "whole number"]),
        (["assess", "--shots", "1e20"], ["--shots", "1e+12"]),
        (["assess", "--seed", "-1"], ["--seed"]),
        (["assess", "--seed", "1e10"], ["--seed", "4294967295"]),
        (["assess", "--trajectories", "1"], ["--trajectories"]),
        (["assess", "--trajectories", "1e9"], ["--trajectories"]),
        (["sweep", "--points", "100000"], ["--points", "200"]),
        (["sweep", "--points", "2.5"], ["--points"]),
        (["sweep", "--knob", "noise_scale", "--stop", "1e9"], ["--stop", "100"]),
        (["sweep", "--knob", "coherence_us", "--start", "1e-30"], ["--start"]),
        (["sweep", "--workers", "100000"], ["--workers", "256"]),
        (["tune", "--top", "0"], ["--top"]),
        (["tune", "--scales", "1,1e9"], ["scales", "100"]),
        (["budget", "--workers", "0"], ["--workers"]),
    ],
)
def test_command_line_overrides_keep_the_file_bounds(
    args: list[str], needles: list[str], tiny_study: Path, tmp_path: Path
) -> None:
    cache = tmp_path / "never.sqlite"
    code, out, err = run_main([args[0], str(tiny_study), *args[1:], "--cache", str(cache)])
    assert_one_line_refusal(code, err, *needles)
    assert out == ""


# ---------------------------------------------------------------- --out refused before work


@pytest.mark.parametrize("kind", ["file", "empty", "parent-is-file", "folder-for-a-file"])
@pytest.mark.parametrize("job", ["assess", "sweep", "tune", "budget"])
def test_unusable_out_is_refused_before_any_work(
    job: str, kind: str, tiny_study: Path, tmp_path: Path
) -> None:
    blocker = tmp_path / "a-file"
    blocker.write_text("keep me", encoding="utf-8")
    if kind == "file":
        out = str(blocker)
    elif kind == "empty":
        out = ""
    elif kind == "parent-is-file":
        out = str(blocker / "sub")
    else:
        folder = tmp_path / "out"
        name = {"assess": "assess.csv", "sweep": "sweep-noise_scale.png"}.get(job, f"{job}.csv")
        (folder / name).mkdir(parents=True)
        out = str(folder)
    cache = tmp_path / "cache.sqlite"
    code, _, err = run_main([job, str(tiny_study), "--out", out, "--cache", str(cache)])
    assert_one_line_refusal(code, err, "--out")
    assert not cache.exists()  # refused before the cache was opened, let alone any work
    assert blocker.read_text(encoding="utf-8") == "keep me"


def test_output_set_replaces_files_and_clears_stale_staging(tmp_path: Path) -> None:
    from noiselab.common.atomic import STAGING_PREFIX, write_output_set

    out = tmp_path / "out"
    stale = out / f"{STAGING_PREFIX}999999999-x"  # a killed run's folder (no such process)
    stale.mkdir(parents=True)
    (stale / "half.csv").write_text("half", encoding="utf-8")
    (out / "a.csv").write_text("old", encoding="utf-8")

    def write(stage: Path) -> list[Path]:
        assert stage.parent == out and stage.name.startswith(STAGING_PREFIX)
        (stage / "a.csv").write_text("new", encoding="utf-8")
        (stage / "b.json").write_text("{}", encoding="utf-8")
        return [stage / "a.csv", stage / "b.json"]

    written = write_output_set(out, write)
    assert [p.name for p in written] == ["a.csv", "b.json"]
    assert sorted(p.name for p in out.iterdir()) == ["a.csv", "b.json"]
    assert (out / "a.csv").read_text(encoding="utf-8") == "new"

    def fail(stage: Path) -> list[Path]:
        (stage / "a.csv").write_text("never", encoding="utf-8")
        raise RuntimeError("writer failed")

    with pytest.raises(RuntimeError):
        write_output_set(out, fail)
    assert sorted(p.name for p in out.iterdir()) == ["a.csv", "b.json"]  # set untouched
    assert (out / "a.csv").read_text(encoding="utf-8") == "new"


# ---------------------------------------------------------------- cache damage


def test_damaged_cache_entries_are_misses(tiny_study: Path, tmp_path: Path) -> None:
    db = tmp_path / "cache.sqlite"
    args = ["assess", str(tiny_study), "--json", "--cache", str(db)]
    code, first, err = run_main(args)
    assert code == 0, err
    with sqlite3.connect(db) as conn:
        kinds = [k for (k,) in conn.execute("SELECT DISTINCT kind FROM entries")]
        conn.execute("UPDATE entries SET payload = ?", (b"PK\x03\x04 damaged",))
    assert len(kinds) >= 3  # simulations, the optimum and the job result were all damaged
    code, again, err = run_main(args)
    assert code == 0, err
    assert again == first  # recomputed: same numbers
    code, third, err = run_main(args)  # and stored again: read back without recomputation
    assert code == 0 and third == first


def test_failed_cache_writes_are_warned_once(
    tiny_study: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import noiselab.study.cache as cache_module

    real = cache_module.ResultsCache._connection

    class FullDisk:
        """A connection on a full disk: reads work, every write fails."""

        def __init__(self, conn: sqlite3.Connection) -> None:
            self.conn = conn

        def execute(self, sql: str, *args: object) -> object:
            if sql.startswith(("BEGIN", "INSERT", "DELETE")):
                raise sqlite3.OperationalError("database or disk is full")
            return self.conn.execute(sql, *args)

    @contextlib.contextmanager
    def full_disk(self: object) -> object:
        with real(self) as conn:  # type: ignore[arg-type]
            yield FullDisk(conn)

    db = tmp_path / "full.sqlite"
    cache_module.open_cache(db).close()
    monkeypatch.setattr(cache_module.ResultsCache, "_connection", full_disk)
    cache_module._WARNED.discard(str(db))
    code, _, err = run_main(["sweep", str(tiny_study), "--points", "3", "--cache", str(db), "-q"])
    assert code == 0, err
    warnings = [line for line in err.splitlines() if "results cache" in line]
    assert len(warnings) == 1 and "cannot store" in warnings[0], err


# ---------------------------------------------------------------- memory guard before work


def test_twenty_qubit_density_matrix_refused_before_any_work(tmp_path: Path) -> None:
    from noiselab.emulate.engine import engine_call_count

    study = ROOT / "tests" / "data" / "bad_studies" / "density_matrix_20_qubits.yaml"
    calls = engine_call_count()
    code, _, err = run_main(["assess", str(study), "--cache", str(tmp_path / "c.sqlite")])
    assert_one_line_refusal(code, err, "20 qubits", "density matrix", "GiB", "usable")
    # source: from memory, a complex128 density matrix on 20 qubits holds 16 * 4**20 bytes
    need_gib = float(err.split("need about ")[1].split(" GiB")[0])
    assert need_gib >= 16 * 4**20 / 2**30
    assert engine_call_count() == calls


def test_optimizer_estimate_bounds_the_real_sizes() -> None:
    # outside reference: qiskit's own sparse matrix of the Hamiltonian, and the rotations the
    # statevector program really compiles, on LiH / STO-3G (12 qubits, Jordan-Wigner)
    from math import comb

    from noiselab.chem.ansatz import uccsd_circuit
    from noiselab.chem.encode import encode
    from noiselab.chem.molecule import compute_problem, molecule_from_mapping
    from noiselab.chem.statevector import _Rotation, compile_statevector
    from noiselab.study.preflight import _uccsd_rotations

    spec = molecule_from_mapping({"geometry": "Li 0 0 0; H 0 0 1.6", "basis": "sto-3g"})
    qp = encode(compute_problem(spec), "jordan_wigner")
    n = qp.num_qubits
    nnz = qp.hamiltonian.to_matrix(sparse=True).nnz
    assert nnz <= 2**n * (1 + comb(n, 2) + comb(n, 4))
    program = compile_statevector(uccsd_circuit(qp, singles=True, doubles=False))
    rotations = sum(isinstance(s, _Rotation) for s in program.steps)
    assert rotations == _uccsd_rotations(qp.n_orb, qp.n_alpha, qp.n_beta, True, False)


def test_memory_budget_follows_the_address_space_limit() -> None:
    code = (
        "import resource; resource.setrlimit(resource.RLIMIT_AS, (6 * 2**30, 6 * 2**30));"
        "from noiselab.common.memory import memory_budget; b = memory_budget();"
        "print(b.usable, b.limited_by)"
    )
    env = {k: v for k, v in os.environ.items() if k != "NOISELAB_MEMORY_LIMIT_BYTES"}
    env["PYTHONPATH"] = str(ROOT)
    proc = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=60, env=env
    )
    usable, _why = proc.stdout.split(maxsplit=1)
    assert 0 < int(usable) <= int(6 * 2**30 * 0.8)


def test_too_large_problem_is_exit_code_two() -> None:
    assert issubclass(ProblemTooLargeError, InputError)


# ---------------------------------------------------------------- typo warnings


def test_profile_warns_about_typos() -> None:
    from noiselab.device.profile import profile_from_mapping, profile_warnings

    data = {
        "schema_version": 1,
        "name": "typo-chip",
        "qubit_count": 4,
        "links": [[0, 1], [1, 2]],
        "native_gates": {"single_qubit": ["rz", "sx", "x"], "two_qubit": "cz"},
        "durations": {"single_qubit_ns": 35, "two_qubit_ns": 300, "readout_ns": 1500},
        "qubits": {
            "default": {
                "t1_us": 100,
                "t2_us": 199.5,
                "gate_error": 3e-4,
                "flip_0to1": 0.01,
                "flip_1to0": 0.02,
            }
        },
        "couplers": {"default": {"gate_error": 0.5}},
    }
    lines = profile_warnings(profile_from_mapping(data, "typo.yaml"))
    text = "\n".join(lines)
    assert "percentage typed as a fraction" in text and "couplers.default.gate_error" in text
    assert "qubit(s) 3 have no link" in text
    assert "within 1 % of 2 T1" in text and "t2_us" in text
    data["qubits"]["default"]["t2_us"] = 150
    data["couplers"]["default"]["gate_error"] = 0.01
    data["links"] = [[0, 1], [1, 2], [2, 3]]
    assert profile_warnings(profile_from_mapping(data, "ok.yaml")) == []


@pytest.mark.parametrize("path", BAD_PROFILES, ids=lambda p: p.stem)
def test_profile_check_refuses_every_bad_profile_in_one_line(path: Path) -> None:
    code, out, err = run_main(["profile", "check", str(path)])
    assert_one_line_refusal(code, err, str(path))
    assert out == ""


def test_jobs_carry_the_profile_typo_warnings(tmp_path: Path) -> None:
    # a two-qubit error of 0.25 is a percentage typed as a fraction (common practice, no
    # source: two-qubit errors of current chips are of order 1e-3..1e-2); every job that loads
    # the profile says so, on the screen and in its JSON, not only `profile check`
    text = DEVICE.read_text(encoding="utf-8").replace(
        "    gate_error: 2.5e-3", "    gate_error: 0.25", 1
    )
    assert "gate_error: 0.25" in text
    device = tmp_path / "typo-chip.yaml"
    device.write_text(text, encoding="utf-8")
    study = tmp_path / "study.yaml"
    study.write_text(TINY_STUDY.replace("DEVICE", str(device)), encoding="utf-8")
    cache = ["--cache", str(tmp_path / "c.sqlite"), "-q"]
    code, out, err = run_main(["assess", str(study), *cache])
    assert code == 0, err
    assert "percentage typed as a fraction" in out + err
    code, out, err = run_main(["assess", str(study), "--json", *cache])
    assert code == 0, err
    warned = json.loads(out)["device_warnings"]
    assert any("couplers.default.gate_error" in w for w in warned), warned
