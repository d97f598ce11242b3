"""The learner: networks, the squashed Gaussian, soft Q-critics, actor, temperature and the update.

Everything that holds weights or computes a loss. It knows the typed settings of
:mod:`kiln.config` and nothing of tasks, replay, run folders or the training loop.
"""
