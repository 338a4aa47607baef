"""HTTPS with a private camp CA: the certificate is made, served, checked by a client that trusts only that CA,
and its fingerprint travels in the enrolment line."""

from __future__ import annotations

import hashlib
import ssl
from pathlib import Path

import httpx
import pytest
from click.testing import CliRunner

from sync_server.app import create_app
from sync_server.cli import cli
from sync_server.loopback import serve_in_thread
from sync_server.settings import ServerSettings


def test_make_cert_then_serve_https_that_a_pinned_client_trusts(tmp_path: Path) -> None:
    out = CliRunner().invoke(cli, ["server", "make-cert", "--host", "localhost", "--ip", "127.0.0.1",
                                   "--out", str(tmp_path / "tls")])
    assert out.exit_code == 0, out.output
    cert, key, ca = (tmp_path / "tls" / n for n in ("server.pem", "server.key", "camp-ca.pem"))
    assert oct(key.stat().st_mode & 0o777) == "0o600"
    fingerprint = out.output.split("fingerprint (sha256): ")[1].split()[0]
    settings = ServerSettings(database_url=f"sqlite:///{tmp_path / 's.sqlite'}", tls_cert=cert, tls_key=key)
    app = create_app(settings)
    with serve_in_thread(app, tls=(str(cert), str(key))) as base:
        port = int(base.rsplit(":", 1)[1])
        # the standard library's TLS client, trusting only the camp CA, checks the chain and the address
        with httpx.Client(base_url=base, verify=ssl.create_default_context(cafile=str(ca))) as http:
            assert http.get("/v1/status").json()["service"] == "baulk"
            manager = app.state.store.add_device(label="MGR", role="manager")[1]
            made = http.post("/v1/devices", json={"label": "TAB-1", "role": "recorder"},
                             headers={"Authorization": f"Bearer {manager}"}).json()
        served = ssl.get_server_certificate(("127.0.0.1", port))
        der = ssl.PEM_cert_to_DER_cert(served)
        assert ":".join(f"{b:02x}" for b in hashlib.sha256(der).digest()) == fingerprint
        assert made["enrol_line"].endswith("&sha256=" + fingerprint.replace(":", "%3A"))
        # a client that trusts the system roots only refuses the camp certificate
        with pytest.raises(httpx.ConnectError):
            httpx.get(f"{base}/v1/status", verify=ssl.create_default_context())


def test_make_cert_needs_an_address() -> None:
    out = CliRunner().invoke(cli, ["server", "make-cert", "--out", "/tmp/never"])
    assert out.exit_code == 1 and "give the laptop's host name or address" in out.output


def test_a_tablet_pins_the_fingerprint_from_its_code_and_refuses_another(tmp_path: Path) -> None:
    from mobile.enrol import enrol, parse_enrol_line, pinned_context
    from mobile.store import TabletStore
    from schema.errors import EnrolmentRefused
    from sync_server.tls import make_camp_certificates

    made = make_camp_certificates(tmp_path / "tls", hostnames=["localhost"], ips=["127.0.0.1"])
    other = make_camp_certificates(tmp_path / "stranger", hostnames=["localhost"], ips=["127.0.0.1"])
    settings = ServerSettings(database_url=f"sqlite:///{tmp_path / 's.sqlite'}", tls_cert=Path(made["cert"]),
                              tls_key=Path(made["key"]))
    app = create_app(settings)
    with serve_in_thread(app, tls=(made["cert"], made["key"])) as base:
        manager = app.state.store.add_device(label="MGR", role="manager")[1]
        with httpx.Client(base_url=base, verify=ssl.create_default_context(cafile=made["ca"])) as http:
            line = http.post("/v1/devices", json={"label": "TAB-1", "role": "recorder"},
                             headers={"Authorization": f"Bearer {manager}"}).json()["enrol_line"]
        scanned = parse_enrol_line(line)
        assert scanned["server"] == base and scanned["sha256"] == made["fingerprint"]
        with httpx.Client(base_url=base, verify=pinned_context(base, scanned["sha256"])) as http:
            device = enrol(TabletStore.open(tmp_path / "tab.sqlite"), http, scanned["code"])
        assert device.label == "TAB-1"
        with pytest.raises(EnrolmentRefused, match="not the camp server's"):
            pinned_context(base, other["fingerprint"])
