"""``segreport serve --db``: the real command in a subprocess (uvicorn, TLS, a trusted proxy), and
every refusal with its exact message before anything listens.

A non-loopback address is served only over TLS or behind a named TLS proxy, and only for the
host names given (OWASP Transport Layer Security Cheat Sheet; OWASP Session Management Cheat
Sheet: the Secure attribute; RFC 6265bis: the ``__Host-`` prefix; RFC 6797: HSTS).
"""

from __future__ import annotations

import datetime as dt
import ipaddress
import os
import socket
import ssl
import subprocess
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from http.cookies import SimpleCookie
from pathlib import Path

import httpx
import pytest
from lab_support import lab_store
from sqlalchemy import select
from store_support import PASSWORD, cheap_argon2

from reporting.store.audit import body_of
from reporting.store.engine import Database
from reporting.store.schema import EventRow

__all__ = ["cheap_argon2"]  # fixture used by name

ROOT = Path(__file__).resolve().parent.parent
STARTUP_SECONDS = 60


@pytest.fixture(scope="module")
def store(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Database]:
    path = tmp_path_factory.mktemp("serve") / "store.db"
    return path, lab_store(str(path))


@pytest.fixture(scope="module")
def certificate(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    """A self-signed certificate for 127.0.0.1 and lab.test, made with ``cryptography``."""
    from cryptography import x509
    from cryptography.hazmat.primitives import hashes, serialization
    from cryptography.hazmat.primitives.asymmetric import ec
    from cryptography.x509.oid import NameOID

    key = ec.generate_private_key(ec.SECP256R1())
    name = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, "lab.test")])
    now = dt.datetime.now(dt.UTC)
    cert = (
        x509.CertificateBuilder()
        .subject_name(name)
        .issuer_name(name)
        .public_key(key.public_key())
        .serial_number(x509.random_serial_number())
        .not_valid_before(now - dt.timedelta(minutes=5))
        .not_valid_after(now + dt.timedelta(days=1))
        .add_extension(
            x509.SubjectAlternativeName(
                [x509.DNSName("lab.test"), x509.IPAddress(ipaddress.ip_address("127.0.0.1"))]
            ),
            critical=False,
        )
        .add_extension(x509.BasicConstraints(ca=True, path_length=None), critical=True)
        .sign(key, hashes.SHA256())
    )
    folder = tmp_path_factory.mktemp("tls")
    certfile, keyfile = folder / "cert.pem", folder / "key.pem"
    certfile.write_bytes(cert.public_bytes(serialization.Encoding.PEM))
    keyfile.write_bytes(
        key.private_bytes(
            serialization.Encoding.PEM,
            serialization.PrivateFormat.PKCS8,
            serialization.NoEncryption(),
        )
    )
    return certfile, keyfile


def free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        port: int = sock.getsockname()[1]
        return port


def command(*args: str) -> list[str]:
    return [sys.executable, "-m", "reporting", "serve", *args]


def environment(**extra: str) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if k != "SEGREPORT_DB"}
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return env | extra


def refusal(*args: str, cwd: Path) -> tuple[int, str]:
    done = subprocess.run(
        command(*args), capture_output=True, text=True, timeout=120, cwd=cwd, env=environment()
    )
    return done.returncode, done.stderr.strip()


@contextmanager
def running(
    *args: str, port: int, cwd: Path, env: dict[str, str] | None = None
) -> Iterator[subprocess.Popen[str]]:
    """``segreport serve ARGS --port PORT`` in a subprocess until the block ends."""
    process = subprocess.Popen(
        command(*args, "--port", str(port)),
        cwd=cwd,
        env=env or environment(),
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        text=True,
    )
    try:
        deadline = time.monotonic() + STARTUP_SECONDS
        while True:
            if process.poll() is not None:
                pytest.fail(f"serve stopped: {process.stdout.read() if process.stdout else ''}")
            try:
                socket.create_connection(("127.0.0.1", port), timeout=1).close()
                break
            except OSError:
                if time.monotonic() > deadline:
                    pytest.fail("serve did not start listening")
                time.sleep(0.2)
        yield process
    finally:
        process.terminate()
        try:
            process.wait(timeout=20)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait()


def last_event(db: Database, action: str) -> dict[str, object]:
    with db.read() as session:
        rows = session.scalars(select(EventRow).where(EventRow.action == action)).all()
        return body_of(rows[-1])


# --- refusals --------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (  # bad: passwords in clear over the network
            ["--host", "0.0.0.0"],
            "Error: --host 0.0.0.0: a non-loopback address needs TLS (--certfile FILE --keyfile "
            "FILE) or a TLS proxy in front (--behind-proxy --trusted-proxy ADDR); passwords and "
            "session cookies must not cross the network in clear",
        ),
        (  # bad: TLS, but any Host name would be answered (DNS rebinding)
            ["--host", "0.0.0.0", "--certfile", "{cert}", "--keyfile", "{key}"],
            "Error: --host 0.0.0.0: name the host name users open with --allowed-host NAME "
            "(repeatable); requests for any other Host header are refused",
        ),
        (  # bad: a proxy whose address is not named
            ["--host", "0.0.0.0", "--behind-proxy", "--allowed-host", "lab.test"],
            "Error: --behind-proxy: name the proxy's address with --trusted-proxy ADDR "
            "(forwarded headers are believed from that address only)",
        ),
        (  # bad: every address trusted as a proxy
            ["--behind-proxy", "--trusted-proxy", "*"],
            "Error: --trusted-proxy *: name the proxy's address; trusting every address would "
            "let any client forge its address and scheme",
        ),
        (  # bad: half of the TLS pair
            ["--certfile", "{cert}"],
            "Error: --certfile: give --keyfile too (uvicorn serves TLS with both)",
        ),
        (  # bad: a certificate file that is not one
            ["--certfile", "{key}", "--keyfile", "{key}"],
            "Error: --certfile {key}: cannot use this certificate and key (--keyfile {key}):",
        ),
    ],
    ids=["no-tls", "no-allowed-host", "proxy-unnamed", "proxy-star", "half-tls", "bad-cert"],
)
def test_exposed_without_protection_is_refused(
    store: tuple[Path, Database],
    certificate: tuple[Path, Path],
    tmp_path: Path,
    args: list[str],
    message: str,
) -> None:
    cert, key = certificate
    names = {"cert": str(cert), "key": str(key)}
    filled = [a.format(**names) for a in args]
    code, stderr = refusal("--db", str(store[0]), *filled, "--port", str(free_port()), cwd=tmp_path)
    assert code == 1
    assert stderr.startswith(message.format(**names)), stderr
    assert "Traceback" not in stderr


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--db", "{missing}"], "Error: sqlite:///{missing}: no store here; create one with"),
        (
            ["--host", "127.0.0.1"],
            "Error: --host: only with --db (the folder page serves this computer only)",
        ),
        (
            ["--db", "{store}", "--studies", "x"],
            "Error: --studies: not with --db (the studies are in the store)",
        ),
    ],
    ids=["missing-store", "host-without-db", "studies-with-db"],
)
def test_store_and_option_mixups_are_refused(
    store: tuple[Path, Database], tmp_path: Path, args: list[str], message: str
) -> None:
    names = {"missing": str(tmp_path / "missing.db"), "store": str(store[0])}
    code, stderr = refusal(*[a.format(**names) for a in args], cwd=tmp_path)
    assert code == 1 and stderr.startswith(message.format(**names)), stderr
    assert not (tmp_path / "missing.db").exists()  # nothing created


def test_a_busy_port_is_a_plain_error(store: tuple[Path, Database], tmp_path: Path) -> None:
    with socket.socket() as busy:
        busy.bind(("127.0.0.1", 0))
        busy.listen(1)
        port = busy.getsockname()[1]
        code, stderr = refusal("--db", str(store[0]), "--port", str(port), cwd=tmp_path)
    assert code == 1
    assert stderr == (
        f"Error: --port {port}: 127.0.0.1:{port} is already in use; stop the other server or "
        "choose another --port"
    )


# --- real servers -----------------------------------------------------------------------------


def test_tls_on_a_network_address_with_secure_cookie_and_host_check(
    store: tuple[Path, Database], certificate: tuple[Path, Path], tmp_path: Path
) -> None:
    path, db = store
    cert, key = certificate
    port = free_port()
    args = ["--db", str(path), "--host", "0.0.0.0", "--certfile", str(cert), "--keyfile", str(key)]
    with running(*args, "--allowed-host", "lab.test", port=port, cwd=tmp_path):
        trust = ssl.create_default_context(cafile=str(cert))
        with httpx.Client(base_url=f"https://127.0.0.1:{port}", verify=trust) as client:
            answer = client.post("/api/session", json={"user": "rita", "password": PASSWORD})
            assert answer.status_code == 200
            cookie: SimpleCookie = SimpleCookie()
            cookie.load(answer.headers["set-cookie"])
            morsel = cookie["__Host-segreport_session"]
            assert morsel["secure"] and morsel["httponly"] and morsel["path"] == "/"
            assert answer.headers["strict-transport-security"].startswith("max-age=")
            assert "server" not in answer.headers
            assert client.get("/api/session").json()["user"] == "rita"
            assert client.get("/", headers={"host": f"lab.test:{port}"}).status_code == 200
            foreign = client.get("/", headers={"host": "evil.test"})  # bad: DNS rebinding
            assert foreign.status_code == 421
        with pytest.raises(httpx.HTTPError):  # bad: plain http to the TLS port
            httpx.get(f"http://127.0.0.1:{port}/api/session", timeout=5)
    assert last_event(db, "sign_in")["detail"]["address"] == "127.0.0.1"  # type: ignore[index]


def test_behind_a_trusted_proxy_the_forwarded_address_and_scheme_count(
    store: tuple[Path, Database], tmp_path: Path
) -> None:
    path, db = store
    port = free_port()
    args = ["--db", str(path), "--behind-proxy", "--trusted-proxy", "127.0.0.1"]
    with running(*args, port=port, cwd=tmp_path):
        forwarded = {"x-forwarded-proto": "https", "x-forwarded-for": "10.9.8.7"}
        with httpx.Client(base_url=f"http://127.0.0.1:{port}") as client:
            answer = client.post(
                "/api/session", json={"user": "rita", "password": PASSWORD}, headers=forwarded
            )
            assert answer.status_code == 200
            assert "__Host-segreport_session=" in answer.headers["set-cookie"]
            assert "Secure" in answer.headers["set-cookie"]
        assert last_event(db, "sign_in")["detail"]["address"] == "10.9.8.7"  # type: ignore[index]
        with httpx.Client(base_url=f"http://127.0.0.1:{port}") as client:  # the proxy said http
            plain = client.post("/api/session", json={"user": "rita", "password": PASSWORD})
            assert plain.headers["set-cookie"].startswith("segreport_session=")
            assert "Secure" not in plain.headers["set-cookie"]


def test_segreport_db_does_not_switch_serve_to_the_store(
    store: tuple[Path, Database], tmp_path: Path
) -> None:
    port = free_port()
    env = environment(SEGREPORT_DB=str(store[0]))
    with running("--studies", str(tmp_path / "studies"), port=port, cwd=tmp_path, env=env):
        answer = httpx.get(f"http://127.0.0.1:{port}/api/studies", timeout=10)
    assert answer.status_code == 200 and "studies" in answer.json()  # folder mode, no sign-in


def test_lab_mode_over_http_on_loopback_signs_in(
    store: tuple[Path, Database], tmp_path: Path
) -> None:
    port = free_port()
    with (
        running("--db", str(store[0]), port=port, cwd=tmp_path),
        httpx.Client(base_url=f"http://127.0.0.1:{port}") as client,
    ):
        assert client.get("/api/users").status_code == 401
        client.post("/api/session", json={"user": "ada", "password": PASSWORD})
        assert client.get("/api/session").json()["roles"] == ["admin"]


def test_the_server_log_names_no_patient_or_study(
    store: tuple[Path, Database], tmp_path: Path
) -> None:
    # an access log line would carry the worklist's patient filter and study ids in plain text;
    # the audit trail records who did what (HIPAA 164.312(b)), so the server keeps no access log
    port = free_port()
    with (
        running("--db", str(store[0]), port=port, cwd=tmp_path) as process,
        httpx.Client(base_url=f"http://127.0.0.1:{port}") as client,
    ):
        client.post("/api/session", json={"user": "ada", "password": PASSWORD})
        client.get("/api/worklist", params={"patient": "LV-PATIENT-7731"})
        client.get("/api/studies/STUDY-NAMED-7731")
    output = process.stdout.read() if process.stdout else ""
    assert "7731" not in output, output
