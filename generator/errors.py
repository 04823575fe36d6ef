"""The one exception qamsmith raises for bad input: a spec, a table, a flag, a file."""

from __future__ import annotations


class SpecError(ValueError):
    """Invalid user input. The message is one line: the key, the value and what is allowed."""

    def __init__(self, key: str, value: object, allowed: str) -> None:
        self.key = key
        self.value = value
        self.allowed = allowed
        super().__init__(f"{key} = {value!r}: {allowed}")
