"""The Dask backend: a real LocalCluster on loopback gives byte-identical output."""

import pytest

from features import open_catalog
from features.extract import write_features
from tests.conftest import two_class_catalog

distributed = pytest.importorskip("distributed", reason="needs the optional extra pulsesort[dask]")


@pytest.fixture(scope="module")
def cluster():
    """Two worker processes on 127.0.0.1 (no network beyond loopback)."""
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address=None,
                                  worker_dashboard_address=None) as c:
        yield c


def test_dask_features_identical_to_serial(tmp_path, cluster):
    """features on the cluster == serial features, byte for byte."""
    cat = open_catalog(two_class_catalog(tmp_path / "c", n=120, seed=2)[0])
    serial = write_features(cat, tmp_path / "serial.csv", chunk_size=16)
    on_dask = write_features(cat, tmp_path / "dask.csv", chunk_size=16,
                             dask_address=cluster.scheduler_address)
    assert serial.read_bytes() == on_dask.read_bytes()


def test_dask_triage_identical_to_joblib(tmp_path, cluster):
    """Rules triage on the cluster == triage with 2 joblib workers, byte for byte."""
    from classify.triage import triage_catalog

    cat = open_catalog(two_class_catalog(tmp_path / "c", n=120, seed=3)[0])
    triage_catalog(cat, tmp_path / "a.csv", chunk_size=16, n_jobs=2)
    triage_catalog(cat, tmp_path / "b.csv", chunk_size=16,
                   dask_address=cluster.scheduler_address)
    assert (tmp_path / "a.csv").read_bytes() == (tmp_path / "b.csv").read_bytes()
