"""Device profile schema: shipped profiles, resolution helpers, warnings, scaling, bad input."""

from __future__ import annotations

import copy
import math
import subprocess
import sys
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from noiselab.common.errors import InputError
from noiselab.common.yamlio import parse_yaml_mapping
from noiselab.device import thermal
from noiselab.device.profile import (
    CHANNELS,
    DeviceProfile,
    load_profile,
    profile_from_mapping,
    profile_warnings,
    relaxation_gate_infidelity,
    scale_profile,
)

ROOT = Path(__file__).resolve().parents[1]
DEVICES = sorted((ROOT / "configs" / "devices").glob("*.yaml"))
BAD = sorted((ROOT / "tests" / "data" / "bad_profiles").glob("*.yaml"))


def base_mapping() -> dict:
    """A small valid profile as a mapping (3 qubits in a line)."""
    return {
        "schema_version": 1,
        "name": "unit-line-3",
        "qubit_count": 3,
        "links": [[0, 1], [1, 2]],
        "native_gates": {"single_qubit": ["rz", "sx", "x"], "two_qubit": "cz"},
        "durations": {"single_qubit_ns": 35, "two_qubit_ns": 300, "readout_ns": 1500},
        "qubits": {
            "default": {
                "t1_us": 100,
                "t2_us": 80,
                "gate_error": 3e-4,
                "flip_0to1": 0.015,
                "flip_1to0": 0.03,
                "over_rotation_fraction": 0.002,
            },
            "overrides": {1: {"t1_us": 70, "t2_us": 60, "flip_1to0": 0.05}},
        },
        "couplers": {
            "default": {"gate_error": 8e-3, "zz_angle_rad": 0.01},
            "overrides": [{"pair": [2, 1], "gate_error": 1.2e-2}],
        },
        "readout_crosstalk": [{"pair": [1, 0], "joint_flip": 0.004}],
    }


@pytest.fixture(scope="module")
def profile() -> DeviceProfile:
    return profile_from_mapping(base_mapping(), "unit")


# ---- shipped profiles ----------------------------------------------------------------------


def test_at_least_four_shipped_devices():
    assert len(DEVICES) >= 4


@pytest.mark.parametrize("path", DEVICES, ids=lambda p: p.stem)
def test_shipped_profile_loads_cleanly(path: Path):
    p = load_profile(path)
    assert p.name == path.stem
    assert profile_warnings(p) == []
    # the illustrative-values note sits at the top of every file
    assert "illustrative" in path.read_text().splitlines()[0]
    for q in range(p.qubit_count):
        qp = p.qubit(q)
        # physical constraint T2 <= 2 T1 (Nielsen & Chuang sec. 8.3)
        assert qp.t2_us <= 2 * qp.t1_us


def test_typical_device_uses_every_optional_term():
    p = load_profile(ROOT / "configs" / "devices" / "amberline-10.yaml")
    assert p.qubits.overrides and p.couplers.overrides and p.readout_crosstalk
    assert any(p.pair(a, b).zz_angle_rad != 0 for a, b in p.pairs())
    assert p.qubits.default.over_rotation_fraction != 0


# ---- resolution helpers --------------------------------------------------------------------


def test_qubit_resolution_merges_override(profile: DeviceProfile):
    q1 = profile.qubit(1)
    assert (q1.t1_us, q1.t2_us, q1.flip_1to0) == (70, 60, 0.05)
    assert q1.gate_error == 3e-4 and q1.flip_0to1 == 0.015  # from the default
    assert profile.qubit(0).t1_us == 100


def test_pair_helpers(profile: DeviceProfile):
    assert profile.pairs() == ((0, 1), (1, 2))
    assert profile.pair_error(1, 2) == profile.pair_error(2, 1) == 1.2e-2
    assert profile.pair_error(0, 1) == 8e-3
    assert profile.pair(0, 1).zz_angle_rad == 0.01
    assert profile.joint_flip(0, 1) == 0.004 and profile.joint_flip(1, 2) == 0.0
    assert not profile.has_pair(0, 2)
    assert profile.neighbours(1) == (0, 2)
    with pytest.raises(InputError, match="not linked"):
        profile.pair_error(0, 2)
    with pytest.raises(InputError, match="does not exist"):
        profile.qubit(3)


def test_all_to_all_pairs():
    data = base_mapping()
    data["links"] = "all-to-all"
    data["couplers"]["overrides"] = [{"pair": [0, 2], "gate_error": 1e-2}]
    p = profile_from_mapping(data, "unit")
    assert p.pairs() == ((0, 1), (0, 2), (1, 2))
    assert p.pair_error(2, 0) == 1e-2


def test_gate_durations(profile: DeviceProfile):
    assert profile.gate_duration_ns("rz") == 0.0
    assert profile.gate_duration_ns("sx") == 35.0
    assert profile.gate_duration_ns("cz") == 300.0


# ---- warnings --------------------------------------------------------------------------------


def test_warning_when_quoted_error_below_relaxation():
    data = base_mapping()
    data["qubits"]["overrides"][2] = {"gate_error": 1e-5}
    data["couplers"]["overrides"] = [{"pair": [1, 2], "gate_error": 1e-4}]
    p = profile_from_mapping(data, "unit")
    warns = profile_warnings(p)
    assert len(warns) == 2
    assert "qubits.overrides[2].gate_error" in warns[0] and "qubit 2" in warns[0]
    assert "couplers.overrides.gate_error" in warns[1] and "(1, 2)" in warns[1]
    # relaxation floor over a 35 ns gate, T1 = 100 us, T2 = 80 us:
    # r = (3 - 2 exp(-t/T2) - exp(-t/T1)) / 6 (Nielsen & Chuang sec. 8.3 with F_avg = (2F_e+1)/3)
    t = 0.035
    expected = (3 - 2 * math.exp(-t / 80) - math.exp(-t / 100)) / 6
    assert relaxation_gate_infidelity(p, "sx", (2,)) == pytest.approx(expected, rel=1e-12)


# ---- scaling ---------------------------------------------------------------------------------


def test_scale_zero_is_noiseless(profile: DeviceProfile):
    s = scale_profile(profile, 0.0)
    for q in range(s.qubit_count):
        qp = s.qubit(q)
        assert qp.t1_us is None and qp.t2_us is None
        assert qp.gate_error == qp.flip_0to1 == qp.flip_1to0 == 0.0
        assert qp.over_rotation_fraction == 0.0
    for a, b in s.pairs():
        assert s.pair(a, b).gate_error == 0.0 and s.pair(a, b).zz_angle_rad == 0.0
        assert s.joint_flip(a, b) == 0.0
    assert profile_warnings(s) == []


def test_scale_one_is_identity(profile: DeviceProfile):
    s = scale_profile(profile, 1.0)
    for q in range(3):
        assert s.qubit(q) == profile.qubit(q)
    for a, b in profile.pairs():
        assert s.pair(a, b) == profile.pair(a, b)


def test_scale_relaxation_divides_times_only(profile: DeviceProfile):
    s = scale_profile(profile, 2.5, channels=["relaxation"])
    for q in range(3):
        a, b = profile.qubit(q), s.qubit(q)
        assert b.t1_us == pytest.approx(a.t1_us / 2.5)
        assert b.t2_us == pytest.approx(a.t2_us / 2.5)
        assert (b.gate_error, b.flip_0to1, b.flip_1to0) == (
            a.gate_error,
            a.flip_0to1,
            a.flip_1to0,
        )
    assert s.pair_error(1, 2) == profile.pair_error(1, 2)


@pytest.mark.parametrize("channel", CHANNELS)
def test_scale_touches_only_its_channel(profile: DeviceProfile, channel: str):
    s = scale_profile(profile, 2.0, channels=[channel])
    q0, s0 = profile.qubit(1), s.qubit(1)
    p0, ps = profile.pair(1, 2), s.pair(1, 2)
    changed = {
        "relaxation": s0.t1_us != q0.t1_us,
        "single_qubit": s0.gate_error != q0.gate_error,
        "two_qubit": ps.gate_error != p0.gate_error,
        "coherent": s0.over_rotation_fraction != q0.over_rotation_fraction
        or ps.zz_angle_rad != p0.zz_angle_rad,
        "readout": s0.flip_1to0 != q0.flip_1to0 or s.joint_flip(0, 1) != 0.004,
    }
    assert [k for k, v in changed.items() if v] == [channel]


def test_scale_clips_at_physical_maximum(profile: DeviceProfile):
    s = scale_profile(profile, 1e4)
    assert s.qubit(0).gate_error == 0.5  # full single-qubit depolarization: r = 1/2
    assert s.pair_error(0, 1) == 0.75  # full two-qubit depolarization: r = 3/4
    assert s.qubit(1).flip_1to0 == 0.5
    assert abs(s.pair(0, 1).zz_angle_rad) <= math.pi


@pytest.mark.parametrize(
    ("factor", "channels"), [(-0.1, None), (float("nan"), None), (1.0, ["gates"]), ("x", None)]
)
def test_scale_refuses_bad_arguments(profile: DeviceProfile, factor, channels):
    with pytest.raises(InputError) as exc:
        scale_profile(profile, factor, channels)
    assert "\n" not in str(exc.value) and "allowed" in str(exc.value)


# ---- malformed profiles ----------------------------------------------------------------------


def test_bad_corpus_is_large_enough():
    assert len(BAD) >= 20


@pytest.mark.parametrize("path", BAD, ids=lambda p: p.stem)
def test_bad_profile_refused_with_one_line(path: Path):
    expect = (
        path.read_text().splitlines()[0].removeprefix("# expect: ") if path.stat().st_size else ""
    )
    with pytest.raises(InputError) as exc:
        load_profile(path)
    msg = str(exc.value)
    assert "\n" not in msg
    assert msg.startswith(str(path))
    assert expect in msg


def _run_cli(args: list[str], capsys) -> tuple[int, str, str]:
    from noiselab.cli.app import main

    with pytest.raises(SystemExit) as exc:
        main(args)
    out, err = capsys.readouterr()
    return int(exc.value.code or 0), out, err


@pytest.mark.parametrize("stem", ["t2_above_2t1", "python_tag", "link_duplicate_reversed", "empty"])
def test_cli_check_refuses(stem: str, capsys):
    path = ROOT / "tests" / "data" / "bad_profiles" / f"{stem}.yaml"
    rc, out, err = _run_cli(["profile", "check", str(path)], capsys)
    assert rc == 2
    assert len(err.strip().splitlines()) == 1
    assert "Traceback" not in err + out


def test_cli_check_subprocess_no_traceback():
    path = ROOT / "tests" / "data" / "bad_profiles" / "unknown_gate_2q.yaml"
    proc = subprocess.run(
        [sys.executable, "-m", "noiselab", "profile", "check", str(path)],
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert proc.returncode == 2
    assert len(proc.stderr.strip().splitlines()) == 1
    assert "native_gates.two_qubit" in proc.stderr and "Traceback" not in proc.stderr


def test_cli_check_warnings_and_strict(tmp_path: Path, capsys):
    import yaml

    data = base_mapping()
    data["qubits"]["default"]["gate_error"] = 1e-6
    f = tmp_path / "warn.yaml"
    f.write_text(yaml.safe_dump(data))
    rc, out, err = _run_cli(["profile", "check", str(f)], capsys)
    assert rc == 0 and "ok:" in out and err.count("noiselab: warning:") == 3
    rc, out, err = _run_cli(["profile", "check", "--strict", str(f)], capsys)
    assert rc == 2


@pytest.mark.parametrize("path", DEVICES, ids=lambda p: p.stem)
def test_cli_show_and_check_shipped(path: Path, capsys):
    rc, out, err = _run_cli(["profile", "show", str(path)], capsys)
    assert rc == 0 and err == ""
    assert "T1 (us)" in out and "2q error" in out and "(ns)" in out
    rc, out, err = _run_cli(["profile", "check", str(path)], capsys)
    assert rc == 0 and "0 warning(s)" in out


# ---- fuzzing: only DeviceProfile or InputError ---------------------------------------------

_scalars = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(-5, 2**70),
    st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=8),
)
_values = st.recursive(
    _scalars,
    lambda inner: st.one_of(
        st.lists(inner, max_size=4),
        st.dictionaries(st.one_of(st.text(max_size=6), st.integers(-2, 5)), inner, max_size=4),
    ),
    max_leaves=12,
)


def _paths(obj, prefix=()):
    yield prefix
    if isinstance(obj, dict):
        for k, v in obj.items():
            yield from _paths(v, (*prefix, k))
    elif isinstance(obj, list):
        for i, v in enumerate(obj):
            yield from _paths(v, (*prefix, i))


_BASE_PATHS = list(_paths(base_mapping()))[1:]


def _outcome(data) -> None:
    try:
        result = profile_from_mapping(data, "fuzz")
    except InputError as exc:
        assert "\n" not in str(exc)
    else:
        assert isinstance(result, DeviceProfile)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    st.lists(
        st.tuples(st.sampled_from(_BASE_PATHS), _values, st.booleans()), min_size=1, max_size=3
    )
)
def test_fuzz_mutated_profile(mutations):
    data = copy.deepcopy(base_mapping())
    for path, value, delete in mutations:
        node = data
        try:
            for key in path[:-1]:
                node = node[key]
            if delete:
                del node[path[-1]]
            else:
                node[path[-1]] = value
        except (KeyError, IndexError, TypeError):
            continue
    _outcome(data)


@settings(max_examples=100, deadline=None)
@given(st.dictionaries(st.text(max_size=10), _values, max_size=6))
def test_fuzz_random_mapping(data):
    _outcome(data)


@settings(max_examples=100, deadline=None)
@given(st.text(max_size=200))
def test_fuzz_random_text(text):
    try:
        data = parse_yaml_mapping(text, "fuzz.yaml", "device profile")
    except InputError:
        return
    _outcome(data)


def test_thermal_idle_time_inverts_infidelity():
    t = thermal.idle_time_for_infidelity_ns(0.01, 100.0, 80.0)
    assert thermal.relaxation_infidelity(t, [(100.0, 80.0)]) == pytest.approx(0.01, rel=1e-9)


def test_profiles_hash_by_content(profile: DeviceProfile):
    again = profile_from_mapping(base_mapping(), "unit")
    assert again == profile and hash(again) == hash(profile)
    assert again.fingerprint == profile.fingerprint
    assert scale_profile(profile, 0.5).fingerprint != profile.fingerprint
    assert len({profile: 1, again: 2}) == 1


def test_profile_commands_import_no_qiskit():
    code = (
        "import sys, noiselab.cli.profile_cmd, noiselab.device, noiselab.device.profile; "
        "sys.exit(1 if 'qiskit' in sys.modules else 0)"
    )
    assert subprocess.run([sys.executable, "-c", code], timeout=60).returncode == 0


@settings(max_examples=60, deadline=None)
@given(
    st.one_of(st.floats(0, 1e6), st.sampled_from([0.0, 1e-300, 1.0, 5e-324])),
    st.sets(st.sampled_from(CHANNELS)),
)
def test_fuzz_scale_stays_valid(factor, channels):
    base = profile_from_mapping(base_mapping(), "unit")
    s = scale_profile(base, factor, sorted(channels))
    for q in range(s.qubit_count):
        qp = s.qubit(q)
        assert 0 <= qp.gate_error <= 0.5 and 0 <= qp.flip_1to0 <= 0.5
        if qp.t1_us is not None:
            # source: Nielsen & Chuang sec. 8.3 (T2 <= 2 T1 survives scaling)
            assert qp.t2_us <= 2 * qp.t1_us * (1 + 1e-12)
    for a, b in s.pairs():
        assert 0 <= s.pair_error(a, b) <= 0.75
