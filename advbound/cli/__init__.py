"""Stage 5, the ``advbound`` command: :mod:`.main` parses and dispatches, one module per subcommand.

Each subcommand module exposes ``register(subparsers)``; :mod:`.paths` holds the
check of output paths the commands share.  Only this package prints.
"""

from advbound.cli.main import (EXIT_FAILED, EXIT_INTERNAL, EXIT_INTERRUPTED, EXIT_OK, EXIT_PIPE, EXIT_USAGE,
                               build_parser, main, os_error_message)

__all__ = ["main", "build_parser", "os_error_message", "EXIT_OK", "EXIT_FAILED", "EXIT_USAGE", "EXIT_INTERNAL",
           "EXIT_INTERRUPTED", "EXIT_PIPE"]
