"""`echoreo score FOLDER` in parallel and on a Dask cluster equals the serial run."""

from __future__ import annotations

import json
import shutil
import subprocess
import sys

import pytest


def _score(folder, *extra):
    proc = subprocess.run([sys.executable, "-m", "echoreo.runner.cli", "score", str(folder),
                           "--json", "--no-write", *extra],
                          capture_output=True, text=True, timeout=600, check=False)
    assert proc.returncode == 0, proc.stderr[-3000:]
    return json.loads(proc.stdout)


def test_pool_and_cluster_equal_serial(demo_study, tmp_path):
    """Same JSON records from --workers 1, --workers 2 and --cluster (a local Dask
    scheduler with two worker processes on 127.0.0.1, started by the test)."""
    folder = tmp_path / "study"
    shutil.copytree(demo_study["out"] / "sessions", folder)
    serial = _score(folder, "--workers", "1")
    assert len(serial) > 0
    assert _score(folder, "--workers", "2") == serial
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address=None) as cluster:
        assert _score(folder, "--cluster", cluster.scheduler_address) == serial
