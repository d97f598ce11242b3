"""Rollouts of a policy in its task, and the evaluation of a saved policy.

:mod:`kiln.evaluation.rollout` is the one place Kiln steps a task with a policy until its episodes
end (training's evaluations and Q-bias diagnostic use it too); :mod:`kiln.evaluation.policy_eval`
evaluates a saved policy folder.
"""
