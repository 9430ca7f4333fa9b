"""Mutual TLS with the scheduler: the Security object built from the settings, and a
batch on a TLS-only cluster (certificates made here with ``cryptography``)."""

from __future__ import annotations

import datetime as dt
import ipaddress

import pytest
from cryptography import x509
from cryptography.hazmat.primitives import hashes, serialization
from cryptography.hazmat.primitives.asymmetric import ec
from cryptography.x509.oid import NameOID
from distributed import LocalCluster
from distributed.security import Security
from pydantic import ValidationError

from service.batch.runner import batch_client, dask_security, run_batch
from service.batch.table import Columns, split_groups
from service.config import Settings

from .data import SPEC, long_table


def _name(text: str) -> x509.Name:
    return x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, text)])


def _write_pki(folder) -> dict[str, str]:
    """A CA and one certificate for 127.0.0.1 signed by it (scheduler, worker, client)."""
    now = dt.datetime.now(dt.UTC)
    ca_key, key = ec.generate_private_key(ec.SECP256R1()), ec.generate_private_key(ec.SECP256R1())
    ca = (x509.CertificateBuilder().subject_name(_name("fanfold test CA"))
          .issuer_name(_name("fanfold test CA")).public_key(ca_key.public_key())
          .serial_number(x509.random_serial_number()).not_valid_before(now)
          .not_valid_after(now + dt.timedelta(days=1))
          .add_extension(x509.BasicConstraints(ca=True, path_length=None), critical=True)
          .sign(ca_key, hashes.SHA256()))
    cert = (x509.CertificateBuilder().subject_name(_name("127.0.0.1")).issuer_name(ca.subject)
            .public_key(key.public_key()).serial_number(x509.random_serial_number())
            .not_valid_before(now).not_valid_after(now + dt.timedelta(days=1))
            .add_extension(x509.SubjectAlternativeName(
                [x509.IPAddress(ipaddress.ip_address("127.0.0.1")),
                 x509.DNSName("localhost")]), critical=False)
            .sign(ca_key, hashes.SHA256()))
    paths = {"ca": folder / "ca.pem", "cert": folder / "cert.pem", "key": folder / "key.pem"}
    paths["ca"].write_bytes(ca.public_bytes(serialization.Encoding.PEM))
    paths["cert"].write_bytes(cert.public_bytes(serialization.Encoding.PEM))
    paths["key"].write_bytes(key.private_bytes(serialization.Encoding.PEM,
                                               serialization.PrivateFormat.PKCS8,
                                               serialization.NoEncryption()))
    return {k: str(v) for k, v in paths.items()}


def _security(settings: Settings) -> Security | None:
    return dask_security(ca_file=settings.dask_tls_ca_file,
                         cert_file=settings.dask_tls_cert_file,
                         key_file=settings.dask_tls_key_file)


def test_the_security_object_comes_from_the_settings(tmp_path):
    assert _security(Settings()) is None
    files = _write_pki(tmp_path)
    settings = Settings(dask_tls_ca_file=files["ca"], dask_tls_cert_file=files["cert"],
                        dask_tls_key_file=files["key"])
    security = _security(settings)
    assert security.tls_ca_file == files["ca"]
    assert (security.tls_client_cert, security.tls_client_key) == (files["cert"], files["key"])
    assert security.require_encryption
    with pytest.raises(ValidationError, match="dask_tls_key_file"):
        Settings(dask_tls_ca_file=files["ca"], dask_tls_cert_file=files["cert"])
    with pytest.raises(ValueError, match="key file is missing"):
        dask_security(ca_file=files["ca"], cert_file=files["cert"])


def test_a_batch_runs_on_a_tls_only_scheduler_and_plain_tcp_is_refused(tmp_path):
    files = _write_pki(tmp_path)
    server = Security(tls_ca_file=files["ca"], tls_scheduler_cert=files["cert"],
                      tls_scheduler_key=files["key"], tls_worker_cert=files["cert"],
                      tls_worker_key=files["key"], tls_client_cert=files["cert"],
                      tls_client_key=files["key"], require_encryption=True)
    settings = Settings(dask_tls_ca_file=files["ca"], dask_tls_cert_file=files["cert"],
                        dask_tls_key_file=files["key"])
    groups = split_groups(long_table(3), Columns(("warehouse", "family"))).groups
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=False, protocol="tls://",
                      security=server, dashboard_address="127.0.0.1:0",
                      scheduler_port=0) as cluster:
        address = cluster.scheduler_address
        assert address.startswith("tls://")
        with batch_client(address=address, security=_security(settings)) as client:
            outcomes = run_batch(client, groups, SPEC, timeout_s=60)
        assert [o.key for o in outcomes] == [g.key for g in groups]
        assert all(o.ok for o in outcomes)
        plain = address.replace("tls://", "tcp://")
        with pytest.raises(RuntimeError, match="encryption"), \
                batch_client(address=plain, security=_security(settings), timeout_s=5):
            pass
