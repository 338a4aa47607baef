"""HTTPS for the camp laptop: a private camp certificate authority and a server certificate for the laptop's
name and addresses (``baulk server make-cert``), and the certificate's SHA-256 fingerprint that enrolment codes
carry so tablets can pin it.

Written with the ``cryptography`` package (X.509 builder). The CA key never leaves the laptop's folder; the
server key file is written readable by its owner only. Behind a reverse proxy (one that already terminates
TLS for an institution's server), skip this and serve plain HTTP on loopback behind it.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import ipaddress
import os
from pathlib import Path
from typing import Any

__all__ = ["cert_fingerprint", "make_camp_certificates"]


def cert_fingerprint(cert_file: Path | str) -> str:
    """SHA-256 of the certificate (DER), as lowercase hex pairs joined by ':'."""
    from cryptography import x509
    from cryptography.hazmat.primitives.serialization import Encoding

    cert = x509.load_pem_x509_certificate(Path(cert_file).read_bytes())
    digest = hashlib.sha256(cert.public_bytes(Encoding.DER)).hexdigest()
    return ":".join(digest[i:i + 2] for i in range(0, 64, 2))


def _write_key(path: Path, key: Any) -> None:
    from cryptography.hazmat.primitives import serialization

    data = key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
                             serialization.NoEncryption())
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
    with os.fdopen(fd, "wb") as fh:
        fh.write(data)


def make_camp_certificates(out: Path, *, hostnames: list[str], ips: list[str], days: int = 400,
                           camp: str = "Baulk camp") -> dict[str, Any]:
    """Make ``camp-ca.pem``/``camp-ca.key`` (kept) and ``server.pem``/``server.key`` (for ``baulk serve``)."""
    from cryptography import x509
    from cryptography.hazmat.primitives import hashes
    from cryptography.hazmat.primitives.asymmetric import ec
    from cryptography.hazmat.primitives.serialization import Encoding
    from cryptography.x509.oid import ExtendedKeyUsageOID, NameOID

    if not hostnames and not ips:
        raise ValueError("give the laptop's host name or address (--host / --ip) so tablets can check the certificate")
    try:
        addresses = [ipaddress.ip_address(ip) for ip in ips]
    except ValueError as exc:
        raise ValueError(f"{exc}; give an address such as 192.168.8.10") from None
    out.mkdir(parents=True, exist_ok=True)
    now = dt.datetime.now(dt.timezone.utc)
    ca_key = ec.generate_private_key(ec.SECP256R1())
    ca_name = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, f"{camp} CA")])
    ca = (x509.CertificateBuilder().subject_name(ca_name).issuer_name(ca_name).public_key(ca_key.public_key())
          .serial_number(x509.random_serial_number()).not_valid_before(now - dt.timedelta(minutes=5))
          .not_valid_after(now + dt.timedelta(days=days))
          .add_extension(x509.BasicConstraints(ca=True, path_length=0), critical=True)
          .add_extension(x509.KeyUsage(digital_signature=True, key_cert_sign=True, crl_sign=True, content_commitment=False,
                                       key_encipherment=False, data_encipherment=False, key_agreement=False,
                                       encipher_only=False, decipher_only=False), critical=True)
          .add_extension(x509.SubjectKeyIdentifier.from_public_key(ca_key.public_key()), critical=False)
          .sign(ca_key, hashes.SHA256()))
    key = ec.generate_private_key(ec.SECP256R1())
    names: list[x509.GeneralName] = [x509.DNSName(h) for h in hostnames] + [x509.IPAddress(a) for a in addresses]
    cn = hostnames[0] if hostnames else str(addresses[0])
    cert = (x509.CertificateBuilder().subject_name(x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, cn)]))
            .issuer_name(ca_name).public_key(key.public_key()).serial_number(x509.random_serial_number())
            .not_valid_before(now - dt.timedelta(minutes=5)).not_valid_after(now + dt.timedelta(days=days))
            .add_extension(x509.SubjectAlternativeName(names), critical=False)
            .add_extension(x509.BasicConstraints(ca=False, path_length=None), critical=True)
            .add_extension(x509.ExtendedKeyUsage([ExtendedKeyUsageOID.SERVER_AUTH]), critical=False)
            .add_extension(x509.AuthorityKeyIdentifier.from_issuer_public_key(ca_key.public_key()), critical=False)
            .sign(ca_key, hashes.SHA256()))
    (out / "camp-ca.pem").write_bytes(ca.public_bytes(Encoding.PEM))
    _write_key(out / "camp-ca.key", ca_key)
    (out / "server.pem").write_bytes(cert.public_bytes(Encoding.PEM))
    _write_key(out / "server.key", key)
    return {"ca": str(out / "camp-ca.pem"), "cert": str(out / "server.pem"), "key": str(out / "server.key"),
            "fingerprint": cert_fingerprint(out / "server.pem"), "names": hostnames + ips,
            "expires": (now + dt.timedelta(days=days)).date().isoformat()}
