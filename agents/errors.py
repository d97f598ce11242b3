"""User-facing errors: one line that names the problem and the fix."""

from envs.errors import TaskError


class KilnError(Exception):
    """A problem with the user's input (config, files, task) that Kiln reports in one line.

    Entry points catch it, print ``kiln: error: <message>`` to stderr and exit with code 2,
    without a traceback and without touching anything already written.
    """


class ConfigError(KilnError):
    """A config value is missing, of the wrong kind or out of range."""


class PolicyFolderError(KilnError):
    """A saved-policy folder is missing, incomplete or inconsistent."""


# Every error a command prints as one line (exit code 2): Kiln's own and the tasks' (envs/ has its own).
USER_ERRORS = (KilnError, TaskError)
