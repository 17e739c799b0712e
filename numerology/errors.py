"""Error types for bad input.

Every problem with what a user gave us (a requirement file, a design file, a
CSV of taps, a command-line option) is raised as :class:`InputError`. The
command line turns it into one line on stderr and exit status 2. An
infeasible request is *not* an error: it is an answer (see ``solver``).
"""

from __future__ import annotations


class InputError(ValueError):
    """Bad user input, located precisely.

    Parameters
    ----------
    place : str
        Where the problem is, e.g. ``"site.toml: environment.max_speed"``.
    message : str
        What was expected, phrased as advice.
    """

    def __init__(self, place: str, message: str):
        self.place = place
        self.message = message
        super().__init__(f"{place}: {message}" if place else message)
