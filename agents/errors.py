"""User-facing errors: one line that names the problem and the fix."""

from __future__ import annotations

from kiln.envs.task_error import TaskError


class KilnError(Exception):
    """A problem with the user's input (config, files, task) that Kiln reports in one line.

    Entry points catch it, print ``kiln: error: <message>`` to stderr and exit with ``exit_code``
    (2: bad input), without a traceback and without touching anything already written.
    """

    exit_code = 2
    prefix = "error"


class ConfigError(KilnError):
    """A config value is missing, of the wrong kind or out of range."""


class PolicyFolderError(KilnError):
    """A saved-policy folder is missing, incomplete or inconsistent."""


class RunFolderError(KilnError):
    """A run folder cannot be used: in use by another process, finished with another config, unwritable."""


class CheckpointError(KilnError):
    """A checkpoint cannot be read, or belongs to another config."""


class RunStopped(KilnError):
    """The run was asked to stop (SIGINT, SIGTERM, launcher gone) and checkpointed first.

    Printed as one line saying how to resume; exit code 130 (SIGINT) or 143 (SIGTERM), as a shell
    reports a process ended by that signal.
    """

    prefix = "stopped"

    def __init__(self, message: str, exit_code: int, orphaned: bool = False) -> None:
        super().__init__(message)
        self.exit_code = exit_code
        # The launching process is gone: a pool worker must end its whole process, not wait idle
        # for tasks that will never come.
        self.orphaned = orphaned


class DivergenceError(KilnError):
    """Training produced a non-finite (or absurdly large) quantity; the run stops before saving it.

    Exit code 3 (not 2): the input was valid, the optimisation failed.

    Args:
        quantity: What went bad (``reward``, ``critic/td_mse``, ``weights of actor``, ...).
        value: The offending value.
        where: When it was seen (``at env step 1234``).
    """

    exit_code = 3

    def __init__(self, quantity: str, value: float, where: str) -> None:
        super().__init__(quantity, value, where)
        self.quantity, self.value, self.where = quantity, value, where
        self.member = 0
        self.last_checkpoint: str | None = None

    def __str__(self) -> str:
        kept = (
            f"the last good checkpoint {self.last_checkpoint} is kept"
            if self.last_checkpoint
            else "no checkpoint had been written yet"
        )
        return (
            f"training diverged {self.where} (member {self.member}): {self.quantity} is {self.value:g}; "
            f"no policy was saved and {kept}: lower the learning rates or check the task's rewards, "
            "then start over with resume=false"
        )


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



class SweepError(KilnError):
    """A sweep's launcher could not finish: a cluster out of reach, a lost job or worker, a failed or
    stopped run. The message names the run or job and what to do; the exit code is the run's own
    (2 bad input, 3 divergence, 130 / 143 stopped) or 1 for a worker process killed outside Kiln.
    """

    def __init__(self, message: str, exit_code: int = 2, prefix: str = "error") -> None:
        super().__init__(message)
        self.exit_code, self.prefix = exit_code, prefix


class TaskSetupError(KilnError, TaskError):
    """A task cannot be built as asked, as Kiln's Python API (kiln.api) raises it: the tasks' own
    :class:`TaskError` (kiln.envs imports nothing else of Kiln, so it has its own) made a KilnError
    too, so that ``except kiln.KilnError`` catches every user error and ``except TaskError`` still works.
    """


# Every error a command prints as one line: Kiln's own and the tasks' (envs/ has its own).
USER_ERRORS = (KilnError, TaskError)
