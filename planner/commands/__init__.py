"""Sub-commands of the ``kncast`` command line, one module each (see planner/cli.py)."""
