"""The one error type a user sees: the CLI prints it on one line and exits 2."""


class ScorewrightError(Exception):
    """A problem with the user's input (model file, data, options), stated in their words."""


class ModelFileError(ScorewrightError):
    """A frozen model file that cannot be trusted; the message names the field."""
