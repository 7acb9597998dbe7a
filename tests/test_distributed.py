"""Runs on dask.distributed clusters give exactly the numbers and files of a local run.

Every cluster here is real: worker processes on loopback (2 workers, one thread each, no
dashboard), started by the test. The case is small (150 water bodies, 8 x 6 cells, 90 daily
steps of spatially varying invented weather) and split into partitions of 64 bodies (each a
task on a worker) and several blocks of time, so merging in order, retries of partitions
lost with a worker and the summaries' chunked sums are all exercised. Results are compared
exactly: the result tables with ``check_exact`` and the CSV files byte for byte.
"""

from __future__ import annotations

import os
import signal
import socket

import numpy as np
import pandas as pd
import pytest
import tomli_w
from builders import LAT, LON, case_config, climate_dataset, pond_layer, write_netcdf
from click.testing import CliRunner
from distributed import Client, LocalCluster

import lakeloss
from lakeloss import execution
from lakeloss.cli import cli
from lakeloss.errors import ClusterError

N_STEPS = 90
N_PARTITIONS = 3  # 150 bodies in partitions of 64
CSV_FILES = ("summary_by_waterbody.csv", "summary_by_period.csv", "summary_by_group.csv")


def _weather() -> dict[str, tuple]:
    """Invented weather that varies in time and space, so block order and cells matter."""
    rng = np.random.default_rng(11)
    shape = (N_STEPS, LAT.size, LON.size)
    day = np.arange(N_STEPS)[:, None, None]
    return {
        "tas": (293.0 + 6 * np.sin(day / 14.0) + rng.normal(0, 2, shape), "K", "air_temperature"),
        "hurs": (np.clip(rng.normal(55, 15, shape), 5, 100), "%", "relative_humidity"),
        "wind": (rng.gamma(3.0, 1.0, shape), "m s-1", "wind_speed"),
        "rsds": (
            rng.uniform(80, 330, shape),
            "W m-2",
            "surface_downwelling_shortwave_flux_in_air",
        ),
        "pr": (rng.exponential(2.0, shape) / 86400.0, "kg m-2 s-1", "precipitation_flux"),
    }


CLIMATE = {
    "air_temperature": "tas",
    "relative_humidity": "hurs",
    "wind_speed": "wind",
    "surface_downwelling_shortwave_flux_in_air": "rsds",
    "precipitation_flux": "pr",
}


@pytest.fixture(scope="module")
def case(tmp_path_factory):
    """The case's files, written once for the module; outputs go under each test's tmp_path."""
    root = tmp_path_factory.mktemp("case")
    layer_path = root / "ponds.gpkg"
    pond_layer(149).to_file(layer_path, layer="ponds", driver="GPKG")
    times = pd.date_range("2031-01-01", periods=N_STEPS, freq="D")
    climate_path = write_netcdf(climate_dataset(times, _weather()), root / "climate.nc")
    config = case_config(layer_path, climate_path, root / "out", "penman_open_water", CLIMATE)
    config["method"]["compare"] = ["priestley_taylor"]
    return config


def _with_compute(config: dict, **compute) -> dict:
    return {**config, "compute": {**config["compute"], **compute}}


def _cluster(**scheduler_kwargs) -> LocalCluster:
    return LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        processes=True,
        host="127.0.0.1",
        dashboard_address=None,
        scheduler_kwargs=scheduler_kwargs,
    )


@pytest.fixture(scope="module")
def scheduler_file(tmp_path_factory):
    return tmp_path_factory.mktemp("scheduler") / "scheduler.json"


@pytest.fixture(scope="module")
def cluster(scheduler_file):
    """A running cluster, as a user would have started it; it writes its scheduler file."""
    with _cluster(scheduler_file=str(scheduler_file)) as running:
        yield running


@pytest.fixture(scope="module")
def reference(case, tmp_path_factory):
    """The default local run (thread pool, blocks sized to memory), written once."""
    result = lakeloss.run(case)
    return result, result.write(tmp_path_factory.mktemp("reference") / "out")


def _assert_identical(result, written, reference) -> None:
    expected, expected_dir = reference
    bodies = result.waterbodies.drop(columns="geometry")
    pd.testing.assert_frame_equal(
        bodies, expected.waterbodies.drop(columns="geometry"), check_exact=True
    )
    assert result.waterbodies.geometry.geom_equals_exact(expected.waterbodies.geometry, 0).all()
    pd.testing.assert_frame_equal(result.by_period, expected.by_period, check_exact=True)
    pd.testing.assert_frame_equal(
        result.summary_by_period, expected.summary_by_period, check_exact=True
    )
    pd.testing.assert_frame_equal(
        result.summary_by_group, expected.summary_by_group, check_exact=True
    )
    for name in CSV_FILES:
        assert (written / name).read_bytes() == (expected_dir / name).read_bytes(), name


def test_reference_is_not_trivial(reference):
    # The comparisons below mean something only if the numbers vary between bodies and months.
    result, _ = reference
    # Bodies inside one shared climate cell get the same numbers (lakeloss.grouping), so
    # not every row differs: 150 ponds over 48 cells, plus those across cell edges, give
    # over a hundred distinct (body, month) values, and every body's months differ.
    by_period = result.by_period
    assert by_period["evap_mm"].nunique() >= 100
    assert (by_period.groupby("pond_id")["evap_mm"].nunique() == 3).all()
    assert result.by_period["period_start"].nunique() == 3
    assert (result.waterbodies["evap_mm"] > 0).all()


def test_small_chunks_give_identical_results(case, reference, tmp_path):
    # 7-step blocks cut every month in the middle; the sums must not depend on where.
    result = lakeloss.run(_with_compute(case, chunk_steps=7))
    _assert_identical(result, result.write(tmp_path / "chunked"), reference)


def test_local_cluster_gives_identical_results(case, reference, tmp_path):
    # [compute] workers starts (and stops) its own LocalCluster of worker processes.
    steps = []
    result = lakeloss.run(
        _with_compute(case, workers=2, chunk_steps=7, partition_bodies=64),
        progress=_recording_bar(steps, partitions=N_PARTITIONS),
    )
    _assert_identical(result, result.write(tmp_path / "cluster"), reference)
    # the progress bar is fed partition by partition, in order, up to every step of each
    assert steps == [N_STEPS] * N_PARTITIONS + [-1]


def test_partitions_in_this_process_give_identical_results(case, reference, tmp_path):
    steps = []
    result = lakeloss.run(
        _with_compute(case, chunk_steps=7, partition_bodies=64),
        progress=_recording_bar(steps, partitions=N_PARTITIONS),
    )
    _assert_identical(result, result.write(tmp_path / "partitions"), reference)
    # locally the bar is fed block by block, partition after partition
    assert steps == ([7] * 12 + [6]) * N_PARTITIONS + [-1]


def test_existing_cluster_by_address(cluster, case, reference, tmp_path):
    config = _with_compute(case, scheduler=cluster.scheduler_address, chunk_steps=10)
    result = lakeloss.run(config)
    _assert_identical(result, result.write(tmp_path / "by_address"), reference)


def test_existing_cluster_by_scheduler_file(cluster, scheduler_file, case, reference, tmp_path):
    assert scheduler_file.is_file()
    config = _with_compute(case, scheduler=str(scheduler_file), chunk_steps=10)
    result = lakeloss.run(config)
    _assert_identical(result, result.write(tmp_path / "by_file"), reference)


def _recording_bar(steps: list[int], on_update=None, partitions: int = 1):
    """A progress factory whose bar records every update (and may act on it)."""

    class Bar:
        def update(self, n: int) -> None:
            steps.append(n)
            if on_update is not None:
                on_update(len(steps))

        def close(self) -> None:
            steps.append(-1)

    class Quiet:  # the weights bar, advanced once per partition
        def update(self, n: int) -> None:
            assert n == 1

        def close(self) -> None:
            pass

    def factory(total: int, label: str) -> Bar | Quiet:
        if label == "weights":
            assert total == partitions
            return Quiet()
        assert (total, label) == (N_STEPS * partitions, "evaporation")
        return Bar()

    return factory


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def test_unreachable_scheduler_is_one_line_cli_error(case, tmp_path, monkeypatch):
    monkeypatch.setattr(execution, "CONNECT_TIMEOUT_S", 0.5)
    config_path = tmp_path / "run.toml"
    config_path.write_text(
        tomli_w.dumps({**case, "output": {**case["output"], "dir": str(tmp_path / "out")}})
    )
    address = f"tcp://127.0.0.1:{_free_port()}"
    result = CliRunner().invoke(cli, ["run", str(config_path), "--scheduler", address, "-q"])
    assert result.exit_code == 2, result.output
    lines = result.output.strip().splitlines()
    assert len(lines) == 1, result.output
    assert lines[0].startswith("error: cannot connect to the dask scheduler at")
    assert address in lines[0]
    assert not (tmp_path / "out").exists()


def test_missing_scheduler_file_is_a_cluster_error(case, tmp_path):
    config = _with_compute(case, scheduler=str(tmp_path / "no-such-scheduler.json"))
    with pytest.raises(ClusterError, match="scheduler file .* does not exist"):
        lakeloss.run(config)


def test_worker_killed_during_run(cluster, case, reference, tmp_path):
    # After the first partition is back, SIGKILL one worker process (its nanny restarts
    # it). Three partitions, at most four in flight: the victim holds an unfinished one when
    # it dies, and it must be recomputed. The run either completes with identical numbers, or fails
    # with a one-line ClusterError and leaves no outputs. Runs last on the shared cluster.
    with Client(cluster) as client:
        victim = sorted(client.run(os.getpid).values())[0]
        killed = []

        def kill_after_first_block(updates: int) -> None:
            if updates == 1:
                os.kill(victim, signal.SIGKILL)
                killed.append(victim)

        steps: list[int] = []
        config = _with_compute(
            case, scheduler=cluster.scheduler_address, chunk_steps=3, partition_bodies=64
        )
        out = tmp_path / "after_kill"
        try:
            result = lakeloss.run(
                config,
                progress=_recording_bar(steps, kill_after_first_block, partitions=N_PARTITIONS),
            )
        except ClusterError as err:
            assert "\n" not in str(err)
            assert not out.exists()
        else:
            _assert_identical(result, result.write(out), reference)
            assert steps == [N_STEPS] * N_PARTITIONS + [-1]
        assert killed == [victim]
        client.wait_for_workers(2, timeout=60)
        assert victim not in client.run(os.getpid).values()
