"""`UsageError`: a user mistake on the command line (exit code 2).

In a module of its own so that subcommands can raise it without importing the package
``__init__`` that imports them.
"""

__all__ = ["UsageError"]


class UsageError(Exception):
    """A user mistake on the command line or in an input file (exit code 2)."""
