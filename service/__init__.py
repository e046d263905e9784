"""The seqtest HTTP service: experiments, looks and decisions over JSON.

Layout (imports point downward only)::

    cli.py, server.py    the serve and keys commands; uvicorn with header timeouts
    api/                 app factory, routers, dependencies, schemas, error handling
    usecases.py          create, look, amend, reads: one transaction each
    views.py             stored records -> JSON answers
    library.py           the only caller of the seqtest library
    db/                  engine and timeouts, tables, migrations, repository
    config.py, logs.py, errors.py   settings, logging, the errors people see

Build the app with :func:`service.api.create_app`; run it with ``seqtest serve``
(or ``python -m service serve``).
"""
