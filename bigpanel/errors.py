"""The one exception type a user should ever see."""


class BigPanelError(Exception):
    """A problem with the user's input or options, stated in one line.

    The CLI prints the message and exits with code 2; nothing else is shown
    unless ``--debug`` is given.
    """
