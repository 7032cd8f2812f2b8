"""The command line: the parser and dispatcher (main) and one module per command (commands)."""

from comparo.cli.main import main

__all__ = ["main"]
