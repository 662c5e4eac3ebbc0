"""One exception family for everything the user can get wrong or the link can fail at.

The command line turns any of these into a single line on stderr and a non-zero exit.

Entry points: EdgevibError, LinkError.
"""


class EdgevibError(Exception):
    """A problem the user can act on (bad input, wrong file, refused parameters). Exit status 2."""

    exit_status = 2


class LinkError(EdgevibError):
    """The serial link to a gateway failed (no reply, bad frame, device refused). Exit status 3."""

    exit_status = 3
