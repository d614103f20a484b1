"""The ``nodecast`` command line (console script ``nodecast``; ``python -m nodecast.cli``).

One module per command, beside argument parsing (``parsing``), the lines printed around results
(``messages``), progress on a terminal (``progress``) and escaping of what reaches it (``terminal``).
It imports the library; the library never imports it.
"""

from nodecast.cli.app import cli, main

__all__ = ["cli", "main"]
