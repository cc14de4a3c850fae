"""The ``landlift`` command: ``demo``, ``score``, ``serve``, ``worker``, ``token``, ``db``.

:mod:`~app.cli.main` builds the parser from the command modules (:mod:`~app.cli.score`,
:mod:`~app.cli.demo`, :mod:`~app.cli.service`) and maps every error a command can meet to one
line on standard error and exit status 2. Commands read settings through
:class:`app.settings.Settings` only and pass them on as arguments.
"""
