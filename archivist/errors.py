"""Errors that stop a run (exit code 2). Problems in the map are findings, not errors."""


class ArchivistError(Exception):
    """archivist cannot run. The message is one line naming the file, key or layer."""

    exit_code = 2

    def __str__(self) -> str:  # always one line
        return " ".join(str(self.args[0] if self.args else "").split())
