"""``segreport store …``: the report store's commands (exact forms in the interface contract).

Passwords are read from the terminal (hidden), or with ``--password-stdin`` from standard input,
one per line: the acting user's (``--as``, or the new admin's for ``init``) first, then any new
password the command sets.
"""

from __future__ import annotations

import json
import sys
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any, TypeVar

import click

from reporting.errors import ReportingError, problems_of
from reporting.store.canonical import Origin

F = TypeVar("F", bound=Callable[..., Any])
ROLES = ("reader", "sonographer", "admin")


@contextmanager
def _user_errors() -> Iterator[None]:
    try:
        yield
    except ReportingError as exc:
        for problem in problems_of(exc):
            click.echo(f"Error: {problem}", err=True)
        sys.exit(1)


def _db(func: F) -> F:
    return click.option(
        "--db",
        metavar="PATH|URL",
        help="Store: a SQLite file or postgresql+psycopg://… URL [default: $SEGREPORT_DB, else ./segreport.db].",
    )(func)


def _settings(func: F) -> F:
    return click.option(
        "--settings",
        "settings_path",
        type=click.Path(dir_okay=False, path_type=Path),
        help="Lab settings file (YAML), as `serve --db` is given: its thresholds for the analyses "
        "a command signs, shows or exports, and its lockout for wrong passwords [default: the "
        "built-in settings].",
    )(func)


def _lab(settings_path: Path | None) -> Any:
    from reporting.settings import load_settings

    return load_settings(settings_path)


def _settings_used(settings_path: Path | None) -> str:
    """Said after signing: a report signed with other settings than the lab page's is no surprise."""
    if settings_path is None:
        return "Analysed with the built-in settings (give the lab's with --settings FILE)"
    return f"Analysed with the settings in {settings_path}"


def _actor(func: F) -> F:
    func = _settings(func)
    func = click.option(
        "--password-stdin",
        is_flag=True,
        help="Read passwords from standard input, one per line (the acting user's first).",
    )(func)
    return click.option("--as", "actor", required=True, metavar="USER", help="The acting user.")(
        func
    )


class _Passwords:
    def __init__(self, from_stdin: bool) -> None:
        self.from_stdin = from_stdin

    def read(self, prompt: str, *, new: bool = False) -> str:
        if self.from_stdin:
            from reporting.store.users import MAX_PASSWORD_CHARS

            # bounded: a line longer than any password is refused, not read to its end
            line = sys.stdin.readline(MAX_PASSWORD_CHARS + 2)
            if not line:
                raise ReportingError(f"--password-stdin: no line for the {prompt.lower()}")
            password = line.rstrip("\r\n")
            if len(password) > MAX_PASSWORD_CHARS:
                raise ReportingError(
                    f"--password-stdin: the line for the {prompt.lower()} is longer than "
                    f"{MAX_PASSWORD_CHARS:,} characters, more than any password"
                )
            return password
        value = click.prompt(prompt, hide_input=True, confirmation_prompt=new, err=True)
        assert isinstance(value, str)
        return value


def _login(
    db: str | None,
    actor: str,
    passwords: _Passwords,
    role: Any = None,
    *,
    settings: Any = None,
) -> tuple[Any, Any]:
    from reporting.store.service import act_as, open_store

    database = open_store(db)
    password = passwords.read(f"Password for {actor}")
    who = act_as(database, actor, password, role=role, settings=settings)
    return database, who


@click.group("store")
def store() -> None:
    """Report store: every version of each study, electronic signatures, amendments and addenda,
    and an append-only audit trail with a hash chain (SQLite file or PostgreSQL)."""


@store.command("init")
@_db
@click.option(
    "--admin", required=True, metavar="NAME", help="User id of the first user (admin and reader)."
)
@click.option("--full-name", help="Printed name of the first user [default: NAME].")
@click.option(
    "--password-stdin", is_flag=True, help="Read the new admin's password from standard input."
)
def init(db: str | None, admin: str, full_name: str | None, password_stdin: bool) -> None:
    """Create a new store and its first user (the only unauthenticated act)."""
    from reporting.store.service import init_store

    with _user_errors():
        password = _Passwords(password_stdin).read(f"New password for {admin}", new=True)
        database = init_store(db, admin, full_name=full_name, password=password, origin=Origin.CLI)
        click.echo(f"Created the store {database.shown} with user {admin}", err=True)


@store.command("upgrade")
@_db
def upgrade(db: str | None) -> None:
    """Apply the schema migrations to an existing store."""
    from reporting.store.engine import resolve_url, shown, sqlite_file
    from reporting.store.migrate import upgrade as run_upgrade

    with _user_errors():
        url = resolve_url(db)
        path = sqlite_file(url)
        if path is not None and not path.exists():
            from reporting.store.errors import StoreError

            raise StoreError(shown(url), "no store here (`store init` creates one)")
        before, after = run_upgrade(url)
        click.echo(f"Store {shown(url)}: schema {before or 'none'} -> {after}", err=True)


@store.group("user")
def user() -> None:
    """Manage users (admins only)."""


@user.command("add")
@click.argument("name")
@click.option(
    "--role",
    "roles",
    multiple=True,
    required=True,
    type=click.Choice(ROLES),
    help="Role (repeatable).",
)
@click.option("--full-name", help="Printed name shown on signed reports [default: NAME].")
@_actor
@_db
def user_add(
    name: str,
    roles: tuple[str, ...],
    full_name: str | None,
    actor: str,
    password_stdin: bool,
    settings_path: Path | None,
    db: str | None,
) -> None:
    """Add user NAME with a temporary password (it cannot sign until NAME changes it)."""
    from reporting.store.users import Role, add

    with _user_errors():
        passwords = _Passwords(password_stdin)
        lab = _lab(settings_path)
        database, who = _login(db, actor, passwords, Role.ADMIN, settings=lab)
        new = passwords.read(f"Temporary password for {name}", new=True)
        add(
            database,
            name,
            full_name=full_name or name,
            roles=[Role(r) for r in roles],
            password=new,
            actor=who.name,
            origin=Origin.CLI,
        )
        click.echo(f"Added user {name} ({', '.join(sorted(roles))})", err=True)


@user.command("reset-password")
@click.argument("name")
@_actor
@_db
def user_reset(
    name: str, actor: str, password_stdin: bool, settings_path: Path | None, db: str | None
) -> None:
    """Give NAME a temporary password (it cannot sign until NAME changes it)."""
    from reporting.store.users import Role, set_password

    with _user_errors():
        passwords = _Passwords(password_stdin)
        lab = _lab(settings_path)
        database, who = _login(db, actor, passwords, Role.ADMIN, settings=lab)
        new = passwords.read(f"Temporary password for {name}", new=True)
        set_password(database, name, new, temporary=True, actor=who.name, origin=Origin.CLI)
        click.echo(f"Reset the password of {name} (temporary until changed)", err=True)


@user.command("unlock")
@click.argument("name")
@_actor
@_db
def user_unlock(
    name: str, actor: str, password_stdin: bool, settings_path: Path | None, db: str | None
) -> None:
    """Unlock NAME after too many wrong passwords."""
    from reporting.store.users import Role, unlock

    with _user_errors():
        lab = _lab(settings_path)
        database, who = _login(db, actor, _Passwords(password_stdin), Role.ADMIN, settings=lab)
        unlock(database, name, actor=who.name, origin=Origin.CLI)
        click.echo(f"Unlocked {name}", err=True)


@user.command("change-password")
@_actor
@_db
def user_change(
    actor: str, password_stdin: bool, settings_path: Path | None, db: str | None
) -> None:
    """Change your own password (current one first, then the new one)."""
    from reporting.store.users import set_password

    with _user_errors():
        passwords = _Passwords(password_stdin)
        lab = _lab(settings_path)
        database, who = _login(db, actor, passwords, settings=lab)
        new = passwords.read(f"New password for {actor}", new=True)
        set_password(database, who.name, new, temporary=False, actor=who.name, origin=Origin.CLI)
        click.echo(f"Changed the password of {actor}", err=True)


@store.command("import")
@click.argument("paths", nargs=-1, required=True, type=click.Path(path_type=Path))
@_actor
@_db
def import_(
    paths: tuple[Path, ...],
    actor: str,
    password_stdin: bool,
    settings_path: Path | None,
    db: str | None,
) -> None:
    """Import study files: new studies, or new versions of unsigned ones (all or nothing)."""
    from reporting.store.versions import import_files

    with _user_errors():
        lab = _lab(settings_path)
        database, who = _login(db, actor, _Passwords(password_stdin), settings=lab)
        for item in import_files(database, paths, who, origin=Origin.CLI):
            what = "new version" if item.new else "unchanged"
            click.echo(f"{item.study_id} v{item.version}: {what} ({item.path})")


@store.command("sign")
@click.argument("study_id")
@click.option(
    "--meaning",
    metavar="TEXT",
    help="Meaning of the signature [default: reviewed and approved as the final report].",
)
@_actor
@_db
def sign(
    study_id: str,
    meaning: str | None,
    actor: str,
    password_stdin: bool,
    settings_path: Path | None,
    db: str | None,
) -> None:
    """Sign the latest version of STUDY_ID (password re-entered)."""
    from reporting.store.signing import sign as run_sign

    with _user_errors():
        lab = _lab(settings_path)
        database, who = _login(db, actor, _Passwords(password_stdin), settings=lab)
        signed = run_sign(database, study_id, who, meaning=meaning, origin=Origin.CLI, settings=lab)
        click.echo(
            f"Signed {signed.study_id} v{signed.version} ({signed.status.value}); PDF sha256 {signed.pdf_sha256}"
        )
        click.echo(_settings_used(settings_path), err=True)


@store.command("amend")
@click.argument("study_id")
@click.argument("file", required=False, type=click.Path(path_type=Path))
@click.option(
    "--reason", metavar="TEXT", help="Why the signed version is replaced (needed with FILE)."
)
@click.option(
    "--addendum", metavar="TEXT", help="Text added to the signed report (instead of FILE)."
)
@click.option(
    "--correction",
    is_flag=True,
    help="The new version corrects an error (status corrected, not amended).",
)
@click.option("--meaning", metavar="TEXT", help="Meaning of the signature.")
@_actor
@_db
def amend(
    study_id: str,
    file: Path | None,
    reason: str | None,
    addendum: str | None,
    correction: bool,
    meaning: str | None,
    actor: str,
    password_stdin: bool,
    settings_path: Path | None,
    db: str | None,
) -> None:
    """Make and sign a new version of a signed study: from FILE (with --reason) or --addendum TEXT."""
    from reporting.store.signing import amend as run_amend

    with _user_errors():
        lab = _lab(settings_path)
        database, who = _login(db, actor, _Passwords(password_stdin), settings=lab)
        signed = run_amend(
            database,
            study_id,
            who,
            path=file,
            addendum=addendum,
            reason=reason,
            correction=correction,
            meaning=meaning,
            origin=Origin.CLI,
            settings=lab,
        )
        click.echo(
            f"Signed {signed.study_id} v{signed.version} ({signed.status.value}); PDF sha256 {signed.pdf_sha256}"
        )
        click.echo(_settings_used(settings_path), err=True)


@store.command("show")
@click.argument("study_id")
@click.option(
    "--version", "number", type=click.IntRange(min=1), help="Version [default: the latest]."
)
@click.option(
    "-o",
    "--output",
    "outdir",
    required=True,
    type=click.Path(file_okay=False, path_type=Path),
    help="Folder for the study, record and PDF.",
)
@_settings
@_db
def show(
    study_id: str, number: int | None, outdir: Path, settings_path: Path | None, db: str | None
) -> None:
    """Write a version's study, record and PDF (a signed version's exactly as signed)."""
    from reporting.store.history import show as run_show
    from reporting.store.service import open_store

    with _user_errors():
        lab = _lab(settings_path)
        for path in run_show(open_store(db), study_id, number, outdir, settings=lab):
            click.echo(f"Wrote {path}")


@store.command("history")
@click.argument("study_id")
@click.option("--json", "as_json", is_flag=True, help="JSON instead of text.")
@_db
def history(study_id: str, as_json: bool, db: str | None) -> None:
    """List the versions, signatures and audit events of STUDY_ID."""
    from reporting.store.history import history as run_history
    from reporting.store.history import history_text
    from reporting.store.service import open_store

    with _user_errors():
        data = run_history(open_store(db), study_id)
    click.echo(
        json.dumps(data, indent=2, ensure_ascii=False) if as_json else history_text(data),
        nl=as_json,
    )


@store.command("verify")
@click.option(
    "--expect-head",
    metavar="HEX",
    help="A chain head kept outside the store (from a signed PDF or an export).",
)
@_db
def verify(expect_head: str | None, db: str | None) -> None:
    """Recompute every hash; print the chain head; exit 1 naming the first broken link."""
    from reporting.store.service import open_store
    from reporting.store.verify import verify as run_verify

    with _user_errors():
        result = run_verify(open_store(db), expect_head)
    click.echo(
        f"ok: {result.events} events, {result.versions} versions, {result.signatures} signatures verified",
        err=True,
    )
    if result.expected_at is not None:
        click.echo(f"ok: the expected head is event {result.expected_at} of this chain", err=True)
    click.echo(result.head)


@store.command("export")
@click.option(
    "-o",
    "--output",
    "outdir",
    required=True,
    type=click.Path(file_okay=False, path_type=Path),
    help="Folder for records, registry and tables.",
)
@click.option(
    "--deidentify", is_flag=True, help="De-identify every record (as `batch --deidentify`)."
)
@click.option(
    "--deid-key-file",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Secret key for the hashed ids [default: $SEGREPORT_DEID_KEY].",
)
@click.option(
    "--final-only", is_flag=True, help="Signed versions only (studies never signed are left out)."
)
@_settings
@_db
def export(
    outdir: Path,
    deidentify: bool,
    deid_key_file: Path | None,
    final_only: bool,
    settings_path: Path | None,
    db: str | None,
) -> None:
    """Write the registry and tables `batch` writes, from the store."""
    from reporting.store.export import export as run_export
    from reporting.store.service import open_store

    if deid_key_file and not deidentify:
        raise click.UsageError("--deid-key-file needs --deidentify")
    with _user_errors():
        key = None
        if deidentify:
            from reporting.deidentify import load_key

            key = load_key(deid_key_file)
        lab = _lab(settings_path)
        exported = run_export(open_store(db), outdir, key=key, final_only=final_only, settings=lab)
        for path in exported:
            click.echo(f"Wrote {path}")
