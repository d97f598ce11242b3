"""kiln.learner.sac.adam_step takes exactly the step torch's fused Adam takes."""

from __future__ import annotations

import torch

from kiln.learner.sac import _adam, adam_step, clear_grads


def test_adam_step_is_bitwise_torch_adam_step() -> None:
    g = torch.Generator().manual_seed(3)
    start = [torch.randn(4, 5, generator=g), torch.randn(4, 1, 5, generator=g)]
    grads = [[torch.randn(t.shape, generator=g) for t in start] for _ in range(4)]
    ours = [torch.nn.Parameter(t.clone()) for t in start]
    theirs = [torch.nn.Parameter(t.clone()) for t in start]
    opt_ours, opt_theirs = _adam(ours, 3e-4), _adam(theirs, 3e-4)
    for step_grads in grads:
        clear_grads(ours)
        opt_theirs.zero_grad(set_to_none=True)
        for p, q, gr in zip(ours, theirs, step_grads):
            p.grad, q.grad = gr.clone(), gr.clone()
        adam_step(opt_ours)
        opt_theirs.step()
    for p, q in zip(ours, theirs):
        assert torch.equal(p, q)
    for p, q in zip(ours, theirs):
        for key in ("step", "exp_avg", "exp_avg_sq"):
            assert torch.equal(opt_ours.state[p][key], opt_theirs.state[q][key])


def test_clear_grads_leaves_no_gradient() -> None:
    p = torch.nn.Parameter(torch.ones(3))
    p.grad = torch.ones(3)
    clear_grads([p])
    assert p.grad is None
