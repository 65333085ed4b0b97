"""One module per ``advbound`` subcommand; each exposes ``register(subparsers)``.

A handler parses nothing itself beyond its arguments, calls one public API
function, prints a summary and returns an exit code (see :mod:`advbound.cli`).
"""
