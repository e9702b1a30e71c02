"""The package version, in a module of its own so that any module can read it without
importing the package (whose __init__ imports the Ledger, the top of the import graph)."""

__version__ = "0.1.0"
