"""User-facing errors: one line that names the problem and the fix."""


class KilnError(Exception):
    """A problem with the user's input (config, files, task) that Kiln reports in one line.

    Entry points catch it, print ``kiln: error: <message>`` to stderr and exit with code 2,
    without a traceback and without touching anything already written.
    """


class ConfigError(KilnError):
    """A config value is missing, of the wrong kind or out of range."""


class PolicyFolderError(KilnError):
    """A saved-policy folder is missing, incomplete or inconsistent."""
