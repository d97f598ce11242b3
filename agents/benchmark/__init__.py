"""What ``kiln bench`` measures, one file per figure.

* :mod:`kiln.benchmark.gemm_shapes` — every matrix product of one update, enumerated from the network sizes.
* :mod:`kiln.benchmark.gemm_rate` — float32 GEMM speed at those shapes (the denominator of the update's fraction).
* :mod:`kiln.benchmark.update_speed` — updates/s of an agent, and of a population against its members one by one.
* :mod:`kiln.benchmark.update_profile` — torch.profiler's per-operator table of the update.
* :mod:`kiln.benchmark.loop_split` — where a whole Pendulum-v1 training loop spends its time.
* :mod:`kiln.benchmark.sweep_wall` — wall time of a small comparison sweep run as separate jobs or as populations.

Nothing is imported here, so importing one part does not load the others.
"""
