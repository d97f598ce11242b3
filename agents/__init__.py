"""Kiln agents: networks, replay, the soft actor-critic update, training loop, policies, exact solvers."""
