"""What ``kiln bench`` measures, one file per figure.

* :mod:`agents.bench.gemm_shapes` — every matrix product of one update, enumerated from the network sizes.
* :mod:`agents.bench.gemm_rate` — float32 GEMM speed at those shapes (the denominator of the update's fraction).
* :mod:`agents.bench.update_speed` — updates/s of an agent, and of a population against its members one by one.
* :mod:`agents.bench.update_profile` — torch.profiler's per-operator table of the update.
* :mod:`agents.bench.loop_split` — where a whole Pendulum-v1 training loop spends its time.
* :mod:`agents.bench.sweep_wall` — wall time of a small comparison sweep run as separate jobs or as populations.

Nothing is imported here, so importing one part does not load the others.
"""
