"""The ``windvane`` command: one module per family of commands, shared options in ``options``."""
