"""Kiln environments: task construction from config and Kiln's own small tasks.

Importing this package registers Kiln's tasks with Gymnasium under the ``kiln/`` namespace.
"""

from kiln.envs.registration import register_kiln_tasks

register_kiln_tasks()
