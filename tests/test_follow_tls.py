"""Certificate failures are their own class, and a lab's CA bundle is honoured (issue 15, item 6).

A loopback HTTPS server presents a certificate for an invented name (``secure-desk.test``), issued by a
CA generated here with the ``openssl`` command line. The name is pinned to 127.0.0.1 in process, so no
DNS query is made and nothing but loopback is contacted. The client checks the certificate against the
bundled Mozilla list by default, which does not hold our CA: ``tls_certificate``. With the ``ca_bundle``
setting, or the standard ``SSL_CERT_FILE`` variable (read by the settings, as OpenSSL-based tools read
it), the same URL resolves. The certificate profile (CA with keyCertSign, leaf with serverAuth and a
subjectAltName) follows RFC 5280 §4.2.1 so that strict verification accepts it too.
"""

from __future__ import annotations

import http.server
import shutil
import ssl
import subprocess
import threading
from pathlib import Path

import pytest

from httpserver import LoopbackOnlyBackend, load_url_list
from httpserver import loopback_settings as settings_for
from linkfold.errors import ConfigError
from linkfold.follow import follow_links, follow_report
from linkfold.settings import load_settings
from linkfold.web import ClientConfig, Failure
from linkfold.web.failures import classify
from linkfold.web.guard import StaticResolver

NAME = "secure-desk.test"

pytestmark = pytest.mark.skipif(shutil.which("openssl") is None, reason="needs the openssl command line")


def _openssl(*args: str, cwd: Path) -> None:
    subprocess.run(["openssl", *args], cwd=cwd, check=True, capture_output=True, timeout=60)


@pytest.fixture(scope="module")
def certs(tmp_path_factory) -> Path:
    d = tmp_path_factory.mktemp("tls")
    _openssl("req", "-x509", "-newkey", "rsa:2048", "-nodes", "-keyout", "ca.key", "-out", "ca.pem", "-days", "2",
             "-subj", "/CN=Invented Lab Test CA", "-addext", "basicConstraints=critical,CA:TRUE",
             "-addext", "keyUsage=critical,keyCertSign,cRLSign", cwd=d)
    _openssl("req", "-newkey", "rsa:2048", "-nodes", "-keyout", "server.key", "-out", "server.csr",
             "-subj", f"/CN={NAME}", cwd=d)
    (d / "ext.cnf").write_text(f"subjectAltName=DNS:{NAME}\nbasicConstraints=critical,CA:FALSE\n"
                               "keyUsage=critical,digitalSignature,keyEncipherment\nextendedKeyUsage=serverAuth\n"
                               "authorityKeyIdentifier=keyid\nsubjectKeyIdentifier=hash\n")
    _openssl("x509", "-req", "-in", "server.csr", "-CA", "ca.pem", "-CAkey", "ca.key", "-CAcreateserial",
             "-out", "server.pem", "-days", "2", "-extfile", "ext.cnf", cwd=d)
    return d


class _Handler(http.server.BaseHTTPRequestHandler):
    def do_HEAD(self) -> None:
        self.send_response(200)
        self.send_header("Content-Type", "text/html")
        self.send_header("Content-Length", "0")
        self.end_headers()

    def log_message(self, format: str, *args: object) -> None:
        pass


@pytest.fixture
def https(certs):
    httpd = http.server.ThreadingHTTPServer(("127.0.0.1", 0), _Handler)
    context = ssl.SSLContext(ssl.PROTOCOL_TLS_SERVER)
    context.load_cert_chain(certs / "server.pem", certs / "server.key")
    httpd.socket = context.wrap_socket(httpd.socket, server_side=True)
    thread = threading.Thread(target=httpd.serve_forever, kwargs={"poll_interval": 0.05}, daemon=True)
    thread.start()
    yield f"https://{NAME}:{httpd.server_address[1]}"
    httpd.shutdown()
    httpd.server_close()
    thread.join(timeout=5)


def _follow(engine, settings):
    backend = LoopbackOnlyBackend()
    summary = follow_links(engine, settings=settings, hosts=[NAME], resolver=StaticResolver({NAME: ["127.0.0.1"]}),
                           backend=backend)
    assert backend.connected and all(h.startswith("127.") for h, _ in backend.connected)
    return summary


def test_unknown_issuer_is_a_certificate_failure_and_the_bundle_cures_it(engine, db_url, tmp_path, https, certs):
    load_url_list(engine, tmp_path, "secure", [https + "/story/1"])
    refused = _follow(engine, settings_for(db_url))
    assert dict(refused.failed) == {"tls_certificate": 1}
    assert follow_report(engine, dataset="secure").failed == {"tls_certificate": 1}
    backend = LoopbackOnlyBackend()
    cured = follow_links(engine, settings=settings_for(db_url, ca_bundle=str(certs / "ca.pem")), hosts=[NAME],
                         resolver=StaticResolver({NAME: ["127.0.0.1"]}), backend=backend, retry_failed=True,
                         due_only=False)
    assert (cured.selected, cured.resolved, dict(cured.failed)) == (1, 1, {})


def test_ssl_cert_file_is_honoured(engine, db_url, tmp_path, https, certs):
    load_url_list(engine, tmp_path, "secure", [https + "/story/2"])
    settings = load_settings({"database_url": db_url, "contact": "mailto:lab@university.example",
                              "allow_networks": ("127.0.0.0/8",), "http_host_delay": 0.0, "http_retries": 0},
                             environ={"SSL_CERT_FILE": str(certs / "ca.pem")})
    assert settings.ca_bundle == str(certs / "ca.pem")
    summary = _follow(engine, settings)
    assert (summary.resolved, dict(summary.failed)) == (1, {})


def test_ca_bundle_setting_wins_over_the_environment(certs):
    env = {"SSL_CERT_FILE": "/nowhere/ca.pem", "LINKFOLD_CA_BUNDLE": str(certs / "ca.pem")}
    assert load_settings(environ=env).ca_bundle == str(certs / "ca.pem")
    assert load_settings(environ={"SSL_CERT_DIR": str(certs)}).ca_bundle == str(certs)
    assert load_settings(environ={}).ca_bundle == ""


def test_an_unreadable_bundle_is_a_configuration_error(tmp_path):
    with pytest.raises(ConfigError, match=r"ca_bundle: .* does not exist"):
        ClientConfig(contact="mailto:lab@university.example", ca_bundle=str(tmp_path / "none.pem")).check()
    junk = tmp_path / "junk.pem"
    junk.write_text("not a certificate\n")
    with pytest.raises(ConfigError, match="holds no CA certificate"):
        ClientConfig(contact="mailto:lab@university.example", ca_bundle=str(junk)).check()


def test_classification_of_tls_errors():
    # ssl.SSLCertVerificationError is what OpenSSL's verification failure raises (Python ssl module docs).
    cert = ssl.SSLCertVerificationError(1, "certificate verify failed: unable to get local issuer certificate")
    assert classify(cert, "https://a.test/").failure is Failure.TLS_CERTIFICATE
    assert "ca_bundle" in classify(cert, "https://a.test/").detail
    assert classify(ssl.SSLError(1, "wrong version number"), "https://a.test/").failure is Failure.TLS
