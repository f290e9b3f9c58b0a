"""Command-line interface: ``refrender render``, ``refrender info``."""
