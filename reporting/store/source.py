"""Where an export's inputs come from: a study file (file mode) or a signed version in the store.

The ``dicom``, ``hl7`` and ``fhir`` commands take ``STUDY`` or ``--store ID [--version N]`` (the two
exclude each other). This module imports nothing heavy: the store's database libraries load only
when ``--store`` is given, the exporters' only when a study file is.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from reporting.errors import UsageError

if TYPE_CHECKING:
    from reporting.interop.from_file import Released


def released_from(
    study: Path | None,
    *,
    store_id: str | None,
    version: int | None,
    db: str | None,
    settings_path: Path | None,
    territory_map: str | None,
    new_study: bool = False,
) -> Released:
    """What ``dicom|hl7|fhir`` export: the STUDY file (preliminary), or with ``store_id`` the
    signed stored version (the two are mutually exclusive; ``version`` and ``db`` go with the store).
    """
    if study is not None and store_id is not None:
        raise UsageError("--store", "give either a STUDY file or --store ID, not both")
    if store_id is None:
        if study is None:
            raise UsageError(
                "STUDY", "missing: give a study file, or --store ID for a signed stored version"
            )
        for given, option in ((version, "--version"), (db, "--db")):
            if given is not None:
                raise UsageError(option, "only with --store ID")
        from reporting.interop.from_file import release_from_file

        return release_from_file(study, settings_path=settings_path, territory_map=territory_map)
    if territory_map is not None:
        raise UsageError(
            "--territory-map", "not with --store: a stored version keeps the map it was signed with"
        )
    from reporting.settings import load_settings
    from reporting.store.release import release_from_store
    from reporting.store.service import open_store

    return release_from_store(
        open_store(db),
        store_id,
        version,
        settings=load_settings(settings_path),
        new_study=new_study,
    )
