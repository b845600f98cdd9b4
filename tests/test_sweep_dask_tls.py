"""`topdrift sweep --scheduler tls://...` as the README says to secure it: a cluster whose
scheduler and workers require TLS with certificates of the user's own CA, and the client's
certificate given through Dask's own configuration (distributed.comm.tls.*, here set the way an
environment variable or ~/.config/dask/ would). With the configuration the sweep runs and writes
the bytes of a local sweep; without it the scheduler is refused in one line (exit 2) and no file
is written. Certificates are made on the spot with the openssl command (a self-signed CA and one
certificate it signs, common practice for a private cluster)."""

import shutil
import subprocess

import pytest

distributed = pytest.importorskip("distributed")
import dask  # noqa: E402  (distributed brings it)
from sweep_grid import reference_sweep, run_datasets, same_datasets, write_grid  # noqa: E402

from topdrift.benchmarks.cli import entry as cli  # noqa: E402

pytestmark = pytest.mark.skipif(shutil.which("openssl") is None, reason="needs openssl")


def _openssl(*args, cwd):
    subprocess.run(["openssl", *args], cwd=cwd, check=True, capture_output=True)


@pytest.fixture(scope="module")
def certs(tmp_path_factory):
    d = tmp_path_factory.mktemp("tls")
    _openssl(
        "req", "-x509", "-newkey", "rsa:2048", "-nodes", "-days", "2", "-subj", "/CN=test-ca",
        "-keyout", "ca.key", "-out", "ca.pem", cwd=d,
    )  # fmt: skip
    _openssl(
        "req", "-newkey", "rsa:2048", "-nodes", "-subj", "/CN=localhost",
        "-keyout", "node.key", "-out", "node.csr", cwd=d,
    )  # fmt: skip
    (d / "san.ext").write_text("subjectAltName=IP:127.0.0.1,DNS:localhost\n")
    _openssl(
        "x509", "-req", "-in", "node.csr", "-CA", "ca.pem", "-CAkey", "ca.key",
        "-CAcreateserial", "-days", "2", "-extfile", "san.ext", "-out", "node.pem", cwd=d,
    )  # fmt: skip
    return d


@pytest.fixture(scope="module")
def tls_cluster(certs):
    sec = distributed.Security(
        tls_ca_file=str(certs / "ca.pem"),
        tls_scheduler_cert=str(certs / "node.pem"),
        tls_scheduler_key=str(certs / "node.key"),
        tls_worker_cert=str(certs / "node.pem"),
        tls_worker_key=str(certs / "node.key"),
        tls_client_cert=str(certs / "node.pem"),
        tls_client_key=str(certs / "node.key"),
        require_encryption=True,
    )
    lc = distributed.LocalCluster(
        n_workers=1,
        threads_per_worker=1,
        processes=True,
        protocol="tls://",
        host="127.0.0.1",
        security=sec,
        dashboard_address=None,
        silence_logs=50,
    )
    try:
        assert lc.scheduler_address.startswith("tls://")
        yield lc
    finally:
        lc.close()


def test_sweep_over_tls_with_dasks_configuration(tls_cluster, certs, tmp_path_factory, tmp_path):
    grid, _, ref = reference_sweep(tmp_path_factory)  # the grid swept locally, one job
    out = tmp_path / "tls.h5"
    config = {
        "distributed.comm.require-encryption": True,
        "distributed.comm.tls.ca-file": str(certs / "ca.pem"),
        "distributed.comm.tls.client.cert": str(certs / "node.pem"),
        "distributed.comm.tls.client.key": str(certs / "node.key"),
    }
    with dask.config.set(config):
        rc = cli.main(
            ["sweep", str(grid), "--out", str(out), "--scheduler", tls_cluster.scheduler_address]
        )
    assert rc == 0
    same_datasets(run_datasets(out), ref)


def test_without_the_client_certificate_the_scheduler_is_refused(
    tls_cluster, tmp_path_factory, tmp_path, capsys, monkeypatch
):
    from topdrift.benchmarks.sweep import executor

    monkeypatch.setattr(executor, "CONNECT_TIMEOUT_S", 3.0)
    grid = write_grid(tmp_path / "grid")
    out = tmp_path / "plain.h5"
    capsys.readouterr()
    rc = cli.main(
        ["sweep", str(grid), "--out", str(out), "--scheduler", tls_cluster.scheduler_address]
    )
    err = capsys.readouterr().err
    assert rc == 2, err
    assert err.count("\n") == 1 and "cannot reach the Dask scheduler" in err, err
    assert not out.exists()
