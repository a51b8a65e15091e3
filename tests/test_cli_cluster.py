"""``--cluster tcp://HOST:PORT`` on the command line: same files as the in-process run.

The executor-level checks (order, retries, tune and sweep through a Client) live in
tests/test_executor.py; this one only checks the command-line path end to end.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from noiselab.cli.app import main
from noiselab.study.assess import demo_study_path


def _run(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    with pytest.raises(SystemExit) as info:
        main(argv)
    out, err = capsys.readouterr()
    return int(info.value.code or 0), out, err


@pytest.mark.cluster
def test_sweep_on_a_cluster_writes_the_same_csv(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    distributed = pytest.importorskip("distributed")
    sweep = [
        "sweep",
        str(demo_study_path()),
        "--knob",
        "noise_scale",
        "--start",
        "0.5",
        "--stop",
        "2",
        "--points",
        "3",
        "--no-cache",
        "--quiet",
    ]
    with distributed.LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        processes=True,
        dashboard_address=None,
        silence_logs=40,
    ) as cluster:
        rc, out, err = _run(
            [*sweep, "--cluster", cluster.scheduler_address, "--out", str(tmp_path / "A")],
            capsys,
        )
    assert rc == 0, err
    assert "dask cluster" in out  # the run line names the executor
    rc, _, err = _run([*sweep, "--out", str(tmp_path / "B")], capsys)
    assert rc == 0, err
    a = (tmp_path / "A" / "sweep-noise_scale.csv").read_text(encoding="utf-8")
    b = (tmp_path / "B" / "sweep-noise_scale.csv").read_text(encoding="utf-8")
    # reference: the in-process run of the same command (common practice, no source)
    assert a == b
    assert len(a.strip().splitlines()) == 1 + 3 * 2  # header, 3 points x (raw, zne_linear)


@pytest.mark.parametrize(
    ("extra", "needle"),
    [
        (["--cluster", "not-an-address"], "not a scheduler address"),
        (["--cluster", "tcp://127.0.0.1:8786", "--workers", "2"], "one of workers or cluster"),
    ],
)
@pytest.mark.parametrize("command", ["tune", "sweep", "budget"])
def test_bad_cluster_option_is_one_line(
    command: str, extra: list[str], needle: str, capsys: pytest.CaptureFixture[str]
) -> None:
    rc, out, err = _run([command, str(demo_study_path()), "--no-cache", "-q", *extra], capsys)
    assert rc == 2
    assert needle in err and len(err.strip().splitlines()) == 1
    assert "Traceback" not in err and out == ""


def test_missing_dask_names_the_extra(
    monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    import sys

    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed -> ImportError
    rc, _, err = _run(
        ["sweep", str(demo_study_path()), "--no-cache", "-q", "--cluster", "tcp://127.0.0.1:1"],
        capsys,
    )
    assert rc == 2 and 'pip install "noiselab[cluster]"' in err
    assert len(err.strip().splitlines()) == 1
