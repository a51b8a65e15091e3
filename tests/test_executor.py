"""Executors: in-process, process pool and a Dask LocalCluster agree; dead workers are retried."""

from __future__ import annotations

import multiprocessing
import os
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest

from noiselab.common.errors import InputError, NoiselabError
from noiselab.study.executor import (
    ENGINE_THREADS_ENV,
    DaskExecutor,
    InProcessExecutor,
    ProcessPoolExecutor,
    make_executor,
)

# --------------------------------------------------------------------------- task functions
# Module level so that worker processes can import them.


def seeded_task(item: tuple[int, int]) -> dict[str, object]:
    """A deterministic numerical task: all randomness comes from the seed in the item."""
    index, seed = item
    rng = np.random.default_rng(seed)
    a = rng.standard_normal((6, 6))
    h = a + a.T
    eigenvalues = np.linalg.eigvalsh(h)
    return {"index": index, "lowest": float(eigenvalues[0]), "trace": float(np.trace(h))}


def dies_once_task(item: tuple[str, int]) -> int:
    """Kill the worker process the first time item 2 runs (marker file records the first try)."""
    marker_dir, index = item
    marker = Path(marker_dir) / f"started-{index}"
    if index == 2 and not marker.exists():
        marker.write_text("first attempt")
        os._exit(1)
    return index * index


def marker_task(item: tuple[str, int]) -> int:
    """Leave a marker file that item ``index`` ran, and return the index."""
    marker_dir, index = item
    (Path(marker_dir) / f"ran-{index}").write_text("ran")
    return index


def _produce_after_first_ran(folder: Path, count: int) -> Iterator[tuple[str, int]]:
    """Items for marker_task; the second exists only once the first has run somewhere else."""
    yield (str(folder), 0)
    deadline = time.monotonic() + 60
    while not (folder / "ran-0").exists():
        assert time.monotonic() < deadline, "item 0 did not run while the items were produced"
        time.sleep(0.02)
    for index in range(1, count):
        yield (str(folder), index)


def always_dies_task(item: int) -> int:
    os._exit(1)


def raises_task(item: int) -> int:
    if item == 1:
        raise ValueError("bad item 1")
    return item


def thread_env_task(item: int) -> tuple[str | None, str | None]:
    return os.environ.get("OMP_NUM_THREADS"), os.environ.get(ENGINE_THREADS_ENV)


def aer_threads_task(item: int) -> int:
    """Threads qiskit-aer used for one 8-qubit density-matrix run (16-qubit internal state)."""
    from qiskit import QuantumCircuit
    from qiskit_aer import AerSimulator

    qc = QuantumCircuit(8)
    qc.h(range(8))
    qc.save_density_matrix()
    result = AerSimulator(method="density_matrix").run(qc, shots=1).result()
    return int(result.results[0].metadata["parallel_state_update"])


ITEMS = [(i, 1000 + 7 * i) for i in range(8)]


def _expected() -> list[dict[str, object]]:
    # Reference: the same function called directly in this process (common practice, no source).
    return [seeded_task(item) for item in ITEMS]


# --------------------------------------------------------------------------- fixtures


@pytest.fixture(scope="module")
def pool() -> ProcessPoolExecutor:
    executor = ProcessPoolExecutor(2)
    yield executor
    executor.close()


@pytest.fixture(scope="module")
def dask_client():
    distributed = pytest.importorskip("distributed")
    import cloudpickle

    # The workers may not find this test module on their path: ship its functions by value.
    cloudpickle.register_pickle_by_value(sys.modules[__name__])
    cluster = distributed.LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        processes=True,
        dashboard_address=None,
        silence_logs=40,
    )
    client = distributed.Client(cluster, set_as_default=False)
    yield client
    client.close()
    cluster.close()
    cloudpickle.unregister_pickle_by_value(sys.modules[__name__])


# --------------------------------------------------------------------------- in-process


def test_in_process_map_order_and_callback() -> None:
    seen: list[int] = []
    with make_executor() as executor:
        assert isinstance(executor, InProcessExecutor)
        out = executor.map(seeded_task, ITEMS, on_result=lambda i, r: seen.append(i))
    assert out == _expected()
    assert seen == list(range(len(ITEMS)))
    assert executor.map(seeded_task, []) == []


# --------------------------------------------------------------------------- process pool


def test_pool_matches_in_process(pool: ProcessPoolExecutor) -> None:
    seen: dict[int, object] = {}
    out = pool.map(seeded_task, ITEMS, on_result=seen.__setitem__)
    assert out == _expected()  # identical floats, not merely close
    assert sorted(seen) == list(range(len(ITEMS)))
    assert [seen[i] for i in range(len(ITEMS))] == out


def test_pool_caps_worker_threads(pool: ProcessPoolExecutor) -> None:
    out = pool.map(thread_env_task, [0, 1])
    assert out == [("1", "1"), ("1", "1")]
    assert os.environ.get(ENGINE_THREADS_ENV) is None  # the parent is left as it was


@pytest.mark.slow
def test_pool_workers_run_aer_single_threaded(pool: ProcessPoolExecutor) -> None:
    # Two workers on a shared machine: each engine must stay on one thread (qiskit-aer reports
    # the threads it used for the state update in the result metadata; qiskit-aer docs).
    assert pool.map(aer_threads_task, [0, 1]) == [1, 1]


def test_pool_runs_items_while_they_are_produced(pool: ProcessPoolExecutor, tmp_path: Path) -> None:
    # the generator waits for item 0 to have run: a map that collected the items first would
    # time out in the generator instead
    assert pool.map(marker_task, _produce_after_first_ran(tmp_path, 4)) == [0, 1, 2, 3]


def test_pool_start_spawns_every_worker_before_any_task() -> None:
    before = {p.pid for p in multiprocessing.active_children()}
    with ProcessPoolExecutor(2) as executor:
        executor.start()
        executor.start()  # once started, nothing more
        assert len({p.pid for p in multiprocessing.active_children()} - before) == 2
        assert executor.map(seeded_task, ITEMS[:3]) == _expected()[:3]


def test_pool_stops_when_the_items_fail(pool: ProcessPoolExecutor) -> None:
    def produce() -> Iterator[int]:
        yield 0
        raise ValueError("no item 1")

    with pytest.raises(ValueError, match="no item 1"):
        pool.map(raises_task, produce())
    assert pool.map(raises_task, iter([0, 2])) == [0, 2]  # the pool is usable afterwards


def test_pool_retries_a_killed_worker_while_items_are_produced(tmp_path: Path) -> None:
    items = ((str(tmp_path), i) for i in range(5))
    with ProcessPoolExecutor(2) as executor:
        assert executor.map(dies_once_task, items) == [i * i for i in range(5)]
        assert executor.restarts == 1


def test_pool_retries_a_killed_worker(tmp_path: Path) -> None:
    items = [(str(tmp_path), i) for i in range(5)]
    seen: list[int] = []
    with ProcessPoolExecutor(2) as executor:
        out = executor.map(dies_once_task, items, on_result=lambda i, r: seen.append(i))
        assert executor.restarts == 1
    assert (tmp_path / "started-2").exists()  # the task really did kill its worker once
    assert out == [i * i for i in range(5)]
    assert sorted(seen) == list(range(5))  # each result reported exactly once


def test_pool_gives_up_after_bounded_attempts() -> None:
    with (
        ProcessPoolExecutor(1, attempts=2) as executor,
        pytest.raises(NoiselabError, match="died 2 times"),
    ):
        executor.map(always_dies_task, [0])


def test_pool_propagates_task_exceptions(pool: ProcessPoolExecutor) -> None:
    with pytest.raises(ValueError, match="bad item 1"):
        pool.map(raises_task, [0, 1, 2])
    assert pool.map(raises_task, [0, 2]) == [0, 2]  # the pool is usable afterwards


# --------------------------------------------------------------------------- argument checks


@pytest.mark.parametrize("workers", [0, -2, 2.5, True])
def test_bad_worker_counts_are_refused(workers: object) -> None:
    with pytest.raises(InputError, match="workers"):
        make_executor(workers=workers)  # type: ignore[arg-type]


def test_workers_and_cluster_together_refused() -> None:
    with pytest.raises(InputError, match="one of workers or cluster"):
        make_executor(workers=2, cluster="tcp://127.0.0.1:8786")


@pytest.mark.parametrize("address", ["localhost:8786", "http//x", "tcp://"])
def test_bad_cluster_address_refused(address: str) -> None:
    with pytest.raises(InputError, match="cluster"):
        make_executor(cluster=address)


def test_missing_dask_names_the_extra(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setitem(sys.modules, "distributed", None)  # import now raises ImportError
    with pytest.raises(InputError, match=r'pip install "noiselab\[cluster\]"'):
        make_executor(cluster="tcp://127.0.0.1:8786")


@pytest.mark.cluster
def test_unreachable_scheduler_is_an_input_error() -> None:
    pytest.importorskip("distributed")
    with pytest.raises(InputError, match="cannot reach"):
        DaskExecutor("tcp://127.0.0.1:9", timeout_s=1.0)


# --------------------------------------------------------------------------- dask


@pytest.mark.cluster
def test_dask_matches_in_process(dask_client) -> None:
    seen: dict[int, object] = {}
    with make_executor(cluster=dask_client) as executor:
        assert isinstance(executor, DaskExecutor)
        out = executor.map(seeded_task, ITEMS, on_result=seen.__setitem__)
    assert out == _expected()
    assert [seen[i] for i in range(len(ITEMS))] == out
    assert dask_client.status != "closed"  # a Client handed in is not closed by the executor


@pytest.mark.cluster
def test_dask_retries_a_killed_worker(dask_client, tmp_path: Path) -> None:
    items = [(str(tmp_path), i) for i in range(5)]
    with DaskExecutor(dask_client) as executor:
        out = executor.map(dies_once_task, items)
    assert (tmp_path / "started-2").exists()  # the first attempt really killed its worker
    assert out == [i * i for i in range(5)]


@pytest.mark.cluster
def test_dask_runs_items_while_they_are_produced(dask_client, tmp_path: Path) -> None:
    with DaskExecutor(dask_client) as executor:
        assert executor.map(marker_task, _produce_after_first_ran(tmp_path, 3)) == [0, 1, 2]


@pytest.mark.cluster
def test_dask_propagates_task_exceptions(dask_client) -> None:
    executor = DaskExecutor(dask_client, retries=0)
    with pytest.raises(ValueError, match="bad item 1"):
        executor.map(raises_task, [0, 1, 2])


# --------------------------------------------------------------------------- study jobs
# The study's own jobs through each back end: the same numbers and the same CSV as in-process.

DEMO_STUDY = Path(__file__).resolve().parents[1] / "configs" / "studies" / "h2-equilibrium.yaml"


@pytest.fixture(scope="module")
def demo_context():
    from noiselab.study.context import build_context
    from noiselab.study.spec import load_study

    study = load_study(DEMO_STUDY)
    return study, build_context(study, cache=None)


def _small_grid():
    from noiselab.study.tune import GridOverride

    return GridOverride(
        readout=["none", "per_qubit_inverse"],
        postselect=["none"],
        amplifier=["none", "stretch", "two_qubit_gates"],
        scales=[[1.0, 2.0, 3.0]],
        fit=["linear"],
        suppress=["none"],
    )


def _tune_json(study, ctx, executor) -> dict:
    from noiselab.study.tune import tune

    result = tune(study, grid=_small_grid(), cache=False, context=ctx, executor=executor)
    return result.to_json()


def _sweep_csv(study, ctx, executor) -> str:
    from noiselab.report.tables import csv_text, sweep_rows
    from noiselab.study.sweep import sweep

    result = sweep(
        study, "noise_scale", values=[0.5, 1.0, 2.0], cache=False, context=ctx, executor=executor
    )
    return csv_text(sweep_rows(result))


@pytest.mark.slow
def test_tune_through_pool_matches_in_process(demo_context, pool: ProcessPoolExecutor) -> None:
    study, ctx = demo_context
    # Reference: the in-process run of the same job (common practice, no source).
    assert _tune_json(study, ctx, pool) == _tune_json(study, ctx, InProcessExecutor())


@pytest.mark.slow
@pytest.mark.cluster
def test_tune_and_sweep_through_dask_match_in_process(demo_context, dask_client) -> None:
    study, ctx = demo_context
    with DaskExecutor(dask_client) as executor:
        tuned = _tune_json(study, ctx, executor)
        swept = _sweep_csv(study, ctx, executor)
    assert tuned == _tune_json(study, ctx, InProcessExecutor())
    local_csv = _sweep_csv(study, ctx, InProcessExecutor())
    assert swept == local_csv
    assert len(local_csv.strip().splitlines()) > 3  # a header and rows for every point


def slow_or_raise_task(item: int) -> int:
    import time

    if item == 0:
        raise ValueError("fails at once")
    time.sleep(30)
    return item


def test_pool_error_does_not_wait_for_running_tasks() -> None:
    import time

    with ProcessPoolExecutor(2) as executor:
        start = time.perf_counter()
        with pytest.raises(ValueError, match="fails at once"):
            executor.map(slow_or_raise_task, [0, 1])
        # the 30 s task was stopped, not awaited (common practice, no source)
        assert time.perf_counter() - start < 20
