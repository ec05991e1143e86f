"""Lab mode of the entry page (``segreport serve --db``): signed-in users over the report store.

:func:`create_lab_app` builds the app; :data:`~reporting.web.lab.access.ACCESS` is the one table
of who may call what. FastAPI loads only when this package is imported.
"""

from __future__ import annotations

from reporting.web.lab.access import ACCESS, Caller, CallerDep, caller
from reporting.web.lab.app import create_lab_app

__all__ = ["ACCESS", "Caller", "CallerDep", "caller", "create_lab_app"]
