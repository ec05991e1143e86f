"""The report store: every version of every study, electronic signatures, amendments and addenda,
an append-only audit trail with a hash chain, and exports (issue #14).

Modules: ``schema`` (tables), ``engine`` (URL, connections, the append lock, database errors),
``migrate`` (Alembic migrations shipped in ``migrations/``), ``triggers`` (append-only triggers),
``users`` (roles, argon2 passwords, lockout), ``audit`` (the event chain), ``content`` (a version's
canonical bytes), ``versions`` (import), ``signing`` (sign, amend, addendum), ``history``
(history, show, prior study), ``worklist`` (the lab's worklist and assignments), ``saving``
(saving from the lab page with version preconditions), ``conflicts`` (field-by-field three-way
differences), ``verify``, ``export``, ``service`` (the operations by name, as the
command line and the web page call them) and ``cli`` (``segreport store …``). SQLAlchemy, Alembic
and argon2 load only when a store command runs.
"""
