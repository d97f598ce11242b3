"""The error a task raises when it cannot be built as asked.

``envs/`` never imports the learner, so tasks have their own error; command-line entry points print it
through the same one-line path as Kiln's other user errors.
"""


class TaskError(Exception):
    """A task cannot be built: unknown id or option, an option out of range, or spaces Kiln cannot drive.

    The message is one line naming the problem and the fix.
    """
