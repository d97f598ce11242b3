"""Kiln's exact answers and the checks against them, in one place.

* :mod:`kiln.exact.soft_dp` — exact soft value iteration and backward pass for finite MDPs.
* :mod:`kiln.exact.check_row` — one comparison against an outside source (expected, got, error,
  tolerance, pass), the row every check returns.
* :mod:`kiln.exact.solver_checks` — the solver and the squashed Gaussian against published tables,
  torch.distributions and SciPy quadrature (seconds); shared by the unit tests and the verify table.
* :mod:`kiln.exact.policy_measures` — a saved policy's mean action by quadrature and its
  log-density in task units, and soft-return rollouts of it.
* :mod:`kiln.exact.agent_vs_exact` — train-and-measure checks on Kiln's exact-answer tasks
  (minutes); shared by the slow tests and the verify table.
* :mod:`kiln.exact.verify_table` — the table behind ``scripts/verify.py``.

Nothing is imported here, so importing the solver does not load torch.
"""
