"""The seqtest HTTP service: experiments, looks and decisions over JSON.

Build the app with :func:`service.app.create_app`; run it with ``seqtest serve``
(or ``python -m service serve``).
"""
