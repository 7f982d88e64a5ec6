"""One tanh Elman layer over a window, with a hand-written backward through the window.

Time-first tensors: inputs [T, B, F], state [B, H], outputs [T, B, H]. The weights are
nn.RNN's own: ``h_t = tanh(x_t W_ih^T + b_ih + h_{t-1} W_hh^T + b_hh)`` (torch docs). The
window's input products are one matrix product; a step is one product and one tanh, written
in place into the output, so nothing is recorded per step. The backward runs the steps in
reverse for the pre-activation gradients, then forms each weight's gradient with one product
over the whole window. With the compiled kernels (``kernels``, training/compiled_steps.py)
each direction is one call of step_kernels.cpp, the same products and steps inside it.
"""

from __future__ import annotations

from typing import Any

import torch
from torch.autograd.function import once_differentiable

from sweeper.training.compiled_layer_grads import LayerGrads, flat_inputs, output_grad
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
        h0, w_hh = h0.contiguous(), w_hh.contiguous()
        usable = kernels is not None and kernels.supports(x, h0, w_ih, w_hh, b_ih, b_hh)
        ctx.kernels = kernels if usable else None
        if ctx.kernels is not None:
            return _compiled_forward(ctx, x, h0, w_ih, w_hh, b_ih, b_hh)
        steps, batch, features = x.shape
        # input products of every step at once, both biases folded in
        out = torch.addmm(b_ih + b_hh, x.reshape(steps * batch, features), w_ih.t())
        out = out.view(steps, batch, -1)
        recurrent = w_hh.t()
        h = h0
        for step in out.unbind(0):
            h = step.addmm_(h, recurrent).tanh_()
        ctx.save_for_backward(x, h0, w_ih, w_hh, out)
        return out, h.clone()

    @staticmethod
    @once_differentiable
    def backward(ctx: Any, d_out: Tensor, d_last: Tensor) -> tuple[Tensor | None, ...]:
        if ctx.kernels is not None:
            return _compiled_backward(ctx, d_out, d_last)
        x, h0, w_ih, w_hh, out = ctx.saved_tensors
        steps = x.shape[0]
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
        need = ctx.needs_input_grad
        d_w_hh, d_b_hh = recurrent_grads(need, h0, out, d_pre)
        d_x, d_w_ih, d_b_ih = input_grads(need, x, d_pre, w_ih)
        return d_x, carry if need[1] else None, d_w_ih, d_w_hh, d_b_ih, d_b_hh, None


def _compiled_forward(
    ctx: Any, x: Tensor, h0: Tensor, w_ih: Tensor, w_hh: Tensor, b_ih: Tensor, b_hh: Tensor
) -> tuple[Tensor, Tensor]:
    """The window through step_kernels.cpp: one call, every product and step inside."""
    steps, batch, features = x.shape
    hidden = w_hh.shape[1]
    flat, w_ih = flat_inputs(x), w_ih.contiguous()
    states = flat.new_empty(steps + 1, batch, hidden)  # h0, then every step's state
    last = flat.new_empty(batch, hidden)
    sizes = (steps, batch, hidden, features)
    ctx.kernels.call("elman_forward", sizes, flat, w_ih, b_ih, w_hh, b_hh, h0, states, last)
    ctx.save_for_backward(flat, w_ih, w_hh, states)
    return states[1:], last


def _compiled_backward(ctx: Any, d_out: Tensor, d_last: Tensor) -> tuple[Tensor | None, ...]:
    flat, w_ih, w_hh, states = ctx.saved_tensors
    steps, batch, hidden = d_out.shape
    d_out, strides = output_grad(d_out)
    need = ctx.needs_input_grad
    grads = LayerGrads.empty(flat, w_ih, w_hh, batch, need[0])
    d_pre = flat.new_empty(steps, batch, hidden)  # scratch
    numbers = (steps, batch, hidden, flat.shape[1], *strides)
    inputs = (flat, w_ih, w_hh, states, d_out, d_last.contiguous(), d_pre)
    ctx.kernels.call("elman_backward", numbers, *inputs, *grads.buffers(), strided=4)
    return grads.returned(need, torch.Size((steps, batch, flat.shape[1])))
