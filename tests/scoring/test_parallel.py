"""Scoring many sessions in parallel gives exactly the serial result."""

from __future__ import annotations

import pandas as pd
import pytest

from echoreo.scoring.parallel import map_sessions
from echoreo.scoring.session_scores import score_session


def _records(results):
    assert all(status == "ok" for status, _ in results), results
    return pd.concat([value.records for _, value in results], ignore_index=True)


@pytest.fixture(scope="module")
def paths(demo_study):
    found = sorted((demo_study["out"] / "sessions").glob("*.sqlite"))
    assert len(found) == 3, demo_study["proc"].stderr[-2000:]
    return found


def test_process_pool_equals_serial(paths, tmp_path):
    """Same records, in input order, from 1 and 2 worker processes; a broken file is
    reported as an input error while the others are still scored."""
    broken = tmp_path / "broken.sqlite"
    broken.write_bytes(b"no database")
    serial = map_sessions(score_session, [*paths, broken], workers=1)
    ticks = []
    pooled = map_sessions(score_session, [*paths, broken], workers=2,
                          progress=lambda done, total: ticks.append((done, total)))
    assert serial[-1][0] == pooled[-1][0] == "input_error"
    assert "not a session file" in pooled[-1][1] or "SQLite" in pooled[-1][1]
    pd.testing.assert_frame_equal(_records(serial[:-1]), _records(pooled[:-1]))
    assert ticks[-1] == (4, 4)


def test_dask_cluster_equals_serial(paths):
    """The same work on a local Dask distributed cluster started by the test
    (2 worker processes, loopback only) returns the serial records."""
    distributed = pytest.importorskip("distributed")
    serial = _records(map_sessions(score_session, paths, workers=1))
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address=None) as cluster:
        dask = _records(map_sessions(score_session, paths, cluster=cluster.scheduler_address))
    pd.testing.assert_frame_equal(serial, dask)


def test_unreachable_cluster_is_a_clear_error(paths):
    from echoreo.errors import ScoringInputError

    with pytest.raises(ScoringInputError, match="cannot reach the Dask scheduler"):
        map_sessions(score_session, paths[:1], cluster="tcp://127.0.0.1:9",
                     connect_timeout_s=1.0)
