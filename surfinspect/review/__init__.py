"""The review station: a local web application over the archive (batches, parts, dispositions, sign-off).

A page is a thin view over the library calls the command line makes: reading
goes through :class:`surfinspect.archive.store.Archive`, dispositions through
``archive.signatures.record_disposition`` and sign-off through
``archive.signatures.sign_batch`` with ``station.batch.render_batch_report``.
Modules: ``app`` (routes, the application), ``pages`` (what each page shows,
read from the archive), ``actions`` (the two signed write actions and their
keys), ``security`` (CSRF tokens, request limits, headers), ``media``
(thumbnails cached by content hash), ``svg`` (rose plot and control charts),
``server`` (uvicorn). Imports station and the rooms below it.
"""

from .._lazy import attach

__getattr__, __dir__ = attach(__name__, ("app", "server"))
