"""The command line: `commands` (parsing, exit codes), `show`, `progress` and `memory`.

`main` is the console entry point (`zonedesign = "zonedesign.cli:main"`); `commands`
imports the jobs only when a command runs, so this stays quick to import.
"""

from zonedesign.cli.commands import main

__all__ = ["main"]
