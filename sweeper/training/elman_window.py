"""One tanh Elman layer over a window, with a hand-written backward through the window.

Time-first tensors: inputs [T, B, F], state [B, H], outputs [T, B, H]. The weights are
nn.RNN's own: ``h_t = tanh(x_t W_ih^T + b_ih + h_{t-1} W_hh^T + b_hh)`` (torch docs). The
window's input products are one matrix product; a step is one product and one tanh, written
in place into the output, so nothing is recorded per step. The backward runs the steps in
reverse for the pre-activation gradients, then forms each weight's gradient with one product
over the whole window. With the compiled kernels (``kernels``, training/compiled_steps.py) the
two step loops are step_kernels.cpp's, the window-wide products the same.
"""

from __future__ import annotations

from typing import Any

import torch
from torch.autograd.function import once_differentiable

from sweeper.training.compiled_steps import Kernels
from sweeper.training.window_grads import input_grads, recurrent_grads

Tensor = torch.Tensor


class ElmanWindow(torch.autograd.Function):
    """``apply(x, h0, w_ih, w_hh, b_ih, b_hh, kernels=None) -> (outputs, last state)``;
    ``kernels``: the compiled step loops, or None for the Python ones."""

    @staticmethod
    def forward(
        ctx: Any,
        x: Tensor,
        h0: Tensor,
        w_ih: Tensor,
        w_hh: Tensor,
        b_ih: Tensor,
        b_hh: Tensor,
        kernels: Kernels | None = None,
    ) -> tuple[Tensor, Tensor]:
        steps, batch, features = x.shape
        h0, w_hh = h0.contiguous(), w_hh.contiguous()
        # input products of every step at once, both biases folded in
        out = torch.addmm(b_ih + b_hh, x.reshape(steps * batch, features), w_ih.t())
        out = out.view(steps, batch, -1)
        usable = kernels is not None and kernels.supports(x, h0, w_ih, w_hh, b_ih, b_hh)
        ctx.kernels = kernels if usable else None
        if ctx.kernels is not None:
            ctx.kernels.call("elman_forward", (steps, batch, out.shape[-1]), h0, w_hh, out)
            h = out[-1]
        else:
            recurrent = w_hh.t()
            h = h0
            for step in out.unbind(0):
                h = step.addmm_(h, recurrent).tanh_()
        ctx.save_for_backward(x, h0, w_ih, w_hh, out)
        return out, h.clone()

    @staticmethod
    @once_differentiable
    def backward(ctx: Any, d_out: Tensor, d_last: Tensor) -> tuple[Tensor | None, ...]:
        x, h0, _, w_hh, out = ctx.saved_tensors
        steps = x.shape[0]
        if ctx.kernels is not None:
            d_pre = torch.add(d_out, 0, out=torch.empty_like(out))  # time-first, contiguous
            d_pre[-1].add_(d_last)
            carry = torch.empty_like(h0)
            ctx.kernels.call("elman_backward", tuple(out.shape), out, w_hh, d_pre, carry)
            return _weight_grads(ctx, d_pre, carry)
        # tanh' = 1 - h^2 for the whole window; the output gradients enter scaled by it at once
        slope = torch.mul(out, out).neg_().add_(1)
        d_pre = torch.mul(d_out, slope, out=torch.empty_like(out))  # time-first, contiguous
        steps_back = d_pre.unbind(0)
        slopes = slope.unbind(0)
        steps_back[-1].addcmul_(d_last, slopes[-1])
        for t in range(steps - 1, 0, -1):
            steps_back[t - 1].addcmul_(torch.mm(steps_back[t], w_hh), slopes[t - 1])
        del slope, slopes
        carry = torch.mm(steps_back[0], w_hh)
        return _weight_grads(ctx, d_pre, carry)


def _weight_grads(ctx: Any, d_pre: Tensor, carry: Tensor) -> tuple[Tensor | None, ...]:
    """Every input's gradient from the window's pre-activation gradients ``d_pre``."""
    x, h0, w_ih, _, out = ctx.saved_tensors
    need = ctx.needs_input_grad
    d_w_hh, d_b_hh = recurrent_grads(need, h0, out, d_pre)
    d_x, d_w_ih, d_b_ih = input_grads(need, x, d_pre, w_ih)
    return d_x, carry if need[1] else None, d_w_ih, d_w_hh, d_b_ih, d_b_hh, None
