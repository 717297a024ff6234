"""User-facing errors: one clear line saying what is wrong and how to fix it."""


class FeltlabError(Exception):
    """An input or setting problem the user can fix. ``stage`` names where it arose."""

    def __init__(self, message: str, stage: str = "input") -> None:
        super().__init__(message)
        self.stage = stage
