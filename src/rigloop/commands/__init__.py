"""Sub-commands of the ``rigloop`` program, one module each (see :mod:`rigloop.cli`)."""
