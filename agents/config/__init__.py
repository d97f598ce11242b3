"""Config checking and presets: the lowest layer of Kiln's library.

Plain run configs (nested dicts, as Hydra composes them) are checked here and turned into typed
settings; old key names are refused with the new one; the random streams a run's ``seed`` implies
are derived here. Nothing in this layer builds a network or a task.
"""
