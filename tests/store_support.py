"""Report-store test support: a throwaway PostgreSQL cluster, fresh store URLs for both backends,
cheap argon2 parameters, and helpers to build and change study files.

The cluster is started with initdb + pg_ctl as an unprivileged user (``runuser -u nobody`` when the
tests run as root, since initdb refuses root), listening on a unix socket in a temporary folder
only (``listen_addresses=''``). A missing PostgreSQL fails the tests; it is never skipped.
"""

from __future__ import annotations

import copy
import glob
import itertools
import os
import shutil
import subprocess
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
import yaml

DEMO = Path(__file__).resolve().parent.parent / "reporting" / "data" / "demo"
PASSWORD = "correct horse battery"
_names = itertools.count(1)


def _pg_bin() -> Path:
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"))
    if found:
        return Path(found[-1]).parent
    on_path = shutil.which("initdb")
    if on_path:
        return Path(on_path).parent
    pytest.fail("PostgreSQL is not installed (Debian package postgresql; .ci/run installs it)")


def _as_owner(command: list[str], owner: str | None) -> list[str]:
    return ["runuser", "-u", owner, "--", *command] if owner else command


@pytest.fixture(scope="session")
def pg_socket() -> Iterator[str]:
    """The socket folder of a throwaway PostgreSQL cluster, stopped after the session."""
    bindir = _pg_bin()
    owner = "nobody" if os.geteuid() == 0 else None
    base = Path(tempfile.mkdtemp(prefix="segreport-pg-"))
    data, sock = base / "data", base / "sock"
    sock.mkdir()
    if owner:
        shutil.chown(base, owner)
        shutil.chown(sock, owner)
    run = {"check": True, "capture_output": True, "text": True, "cwd": base}
    subprocess.run(
        _as_owner(
            [
                str(bindir / "initdb"),
                "-D",
                str(data),
                "-U",
                "postgres",
                "-A",
                "trust",
                "--no-sync",
                "-E",
                "UTF8",
            ],
            owner,
        ),
        **run,
    )  # type: ignore[call-overload]
    options = f"-c listen_addresses='' -k {sock} -c fsync=off -c full_page_writes=off"
    subprocess.run(
        _as_owner(
            [
                str(bindir / "pg_ctl"),
                "-D",
                str(data),
                "-o",
                options,
                "-l",
                str(base / "log"),
                "-w",
                "start",
            ],
            owner,
        ),
        **run,
    )  # type: ignore[call-overload]
    try:
        yield str(sock)
    finally:
        subprocess.run(
            _as_owner([str(bindir / "pg_ctl"), "-D", str(data), "-m", "immediate", "stop"], owner),
            capture_output=True,
            cwd=base,
            check=False,
        )
        shutil.rmtree(base, ignore_errors=True)


def new_pg_url(sock: str) -> str:
    import psycopg

    name = f"store_{os.getpid()}_{next(_names)}"
    with psycopg.connect(host=sock, user="postgres", dbname="postgres", autocommit=True) as conn:
        conn.execute(f"CREATE DATABASE {name}")
    return f"postgresql+psycopg://postgres@/{name}?host={sock}"


@pytest.fixture(params=["sqlite", "postgresql"])
def store_url(request: pytest.FixtureRequest, tmp_path: Path) -> str:
    """A URL for a new store on each backend (nothing created yet)."""
    if request.param == "sqlite":
        return str(tmp_path / "store.db")
    return new_pg_url(request.getfixturevalue("pg_socket"))


@pytest.fixture(autouse=True)
def cheap_argon2(monkeypatch: pytest.MonkeyPatch) -> None:
    """argon2 with small parameters: the tests check behaviour, not hashing cost."""
    from argon2 import PasswordHasher

    from reporting.store import users

    cheap = PasswordHasher(time_cost=1, memory_cost=256, parallelism=1)
    monkeypatch.setattr(users, "hasher", lambda: cheap)


def study_data(name: str = "DEMO-0001") -> dict[str, Any]:
    data = yaml.safe_load((DEMO / f"{name}.yaml").read_text(encoding="utf-8"))
    assert isinstance(data, dict)
    return copy.deepcopy(data)


def write_study(folder: Path, data: dict[str, Any], name: str | None = None) -> Path:
    path = folder / f"{name or data['study']['id']}.yaml"
    folder.mkdir(parents=True, exist_ok=True)
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path
