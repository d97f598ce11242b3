"""Kiln: soft actor-critic on CPU — train, evaluate, compare and hand on stochastic controllers."""
