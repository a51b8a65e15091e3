"""``compare``: the demo on the shipped devices, ranked by P; one-line refusals."""

from __future__ import annotations

from pathlib import Path

import pytest
from scipy.stats import norm

from noiselab.cli.app import main
from noiselab.common.shipped import shipped_files
from noiselab.study.compare import compare

#: the shipped devices but mossline-6, whose quasi-static detuning on three qubits makes every
#: demo simulation a quadrature of hundreds of circuits (minutes per device in the suite)
SHIPPED = [p.stem for p in shipped_files("devices") if p.stem != "mossline-6"]


@pytest.fixture(scope="module")
def result(tmp_path_factory: pytest.TempPathFactory):
    cache = tmp_path_factory.mktemp("compare") / "cache.sqlite"
    return compare("h2-equilibrium", SHIPPED, cache=cache)


def test_compare_ranks_the_shipped_devices_by_p(result) -> None:
    assert len(SHIPPED) == 4
    assert sorted(r.device for r in result.rows) == sorted(SHIPPED)
    ps = [r.p_within_target for r in result.rows]
    assert ps == sorted(ps, reverse=True)
    for a, b in zip(result.rows, result.rows[1:], strict=False):
        if a.p_within_target == b.p_within_target:
            assert abs(a.bias_mha) <= abs(b.bias_mha)
    for row, assessed in zip(result.rows, result.assessed, strict=True):
        # the best recipe of each device is the one with the highest P there
        assert row.p_within_target == max(r.p_within_target for r in assessed.recipes.values())
        # source: REFERENCES.md, P = Phi((t - b)/s) - Phi((-t - b)/s), scipy's normal cdf
        t, b, s = result.target_mha, row.bias_mha, row.std_mha
        assert row.p_within_target == pytest.approx(norm.cdf((t - b) / s) - norm.cdf((-t - b) / s))
        assert row.reaches_target == (row.p_within_target >= result.confidence)
        # device hours of the best recipe's estimate, as assess states them for that device
        assert row.device_hours == assessed.device_hours[row.best_recipe] > 0
    assert "device hours (h)" in result.table_headers()
    assert all(r["device_hours"] > 0 for r in result.to_json()["devices"])
    assert f"'{result.rows[0].device}'" in result.verdict


def _run(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    with pytest.raises(SystemExit) as info:
        main(argv)
    out, err = capsys.readouterr()
    return int(info.value.code or 0), out, err


def test_bad_device_path_exits_2_with_one_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    code, _out, err = _run(
        ["compare", "h2-equilibrium", "--devices", "cobaltgrid-12", str(tmp_path / "no.yaml"),
         "--no-cache", "-q"], capsys,
    )  # fmt: skip
    assert code == 2
    assert len(err.strip().splitlines()) == 1 and "--devices" in err and "Traceback" not in err


def test_device_with_too_few_qubits_exits_2_with_one_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    study = tmp_path / "h2-631g.yaml"
    # H2 in 6-31G: 4 spatial orbitals, 8 qubits in Jordan-Wigner (rustbucket-6 has 6)
    study.write_text(
        'name: h2-631g\nmolecule: {geometry: "H 0 0 0; H 0 0 0.735", basis: 6-31g}\n'
        "encoding: jordan_wigner\nansatz: {kind: uccsd}\ndevice: cobaltgrid-12\n"
        "shots: 100000\nrecipes: {raw: []}\n",
        encoding="utf-8",
    )
    code, _out, err = _run(
        ["compare", str(study), "--devices", "cobaltgrid-12", "rustbucket-6", "--no-cache", "-q"],
        capsys,
    )
    assert code == 2
    line = err.strip()
    assert len(line.splitlines()) == 1 and "8 qubits" in line and "rustbucket-6" in line
