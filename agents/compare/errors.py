"""The one error the comparison raises for input it cannot use."""

from agents.errors import KilnError


class CompareInputError(KilnError):
    """Input the comparison cannot use: the message names the problem and the fix.

    Part of Kiln's error family: every command prints it as ``kiln: error: <message>`` and exits
    with status 2, so the message must be one line that a user can act on without reading code.
    """

    def __init__(self, problem: str, fix: str) -> None:
        """Builds the message from its two halves.

        Args:
            problem: What is wrong, naming the paths or keys involved.
            fix: What the user can do about it.
        """
        self.problem = problem
        self.fix = fix
        super().__init__(f"{problem}; fix: {fix}")
