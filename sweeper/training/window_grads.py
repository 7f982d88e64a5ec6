"""The gradients of a recurrent layer's weights and inputs over a whole window at once.

A layer's step computes ``x_t W_ih^T + b_ih`` and ``h_{t-1} W_hh^T + b_hh`` (nn.RNN / nn.GRU's
parameterisation, torch docs). Once the backward through the window has the gradients of those
two products at every step, each weight's gradient is one matrix product over all T*B rows
instead of T products of B rows.
"""

from __future__ import annotations

from collections.abc import Sequence

import torch

Tensor = torch.Tensor


def recurrent_grads(
    need: Sequence[bool], h0: Tensor, out: Tensor, d_rec: Tensor
) -> tuple[Tensor | None, Tensor | None]:
    """``(d W_hh, d b_hh)`` from the recurrent products' gradients ``d_rec`` [T, B, G*H].

    Step t started from ``out[t - 1]`` (``h0`` for the first), so the product is split in
    two rather than copying the window's previous states into one tensor.
    """
    hidden = out.shape[-1]
    d_w_hh = None
    if need[3]:
        later = d_rec[1:].reshape(-1, d_rec.shape[-1])
        d_w_hh = torch.mm(d_rec[0].t(), h0)
        d_w_hh.addmm_(later.t(), out[:-1].reshape(-1, hidden))
    d_b_hh = d_rec.sum((0, 1)) if need[5] else None
    return d_w_hh, d_b_hh


def input_grads(
    need: Sequence[bool], x: Tensor, d_in: Tensor, w_ih: Tensor
) -> tuple[Tensor | None, Tensor | None, Tensor | None]:
    """``(d x, d W_ih, d b_ih)`` from the input products' gradients ``d_in`` [T, B, G*H]."""
    steps, batch, features = x.shape
    flat = d_in.reshape(steps * batch, -1)
    d_x = torch.mm(flat, w_ih).view(steps, batch, features) if need[0] else None
    d_w_ih = torch.mm(flat.t(), x.reshape(steps * batch, features)) if need[2] else None
    d_b_ih = flat.sum(0) if need[4] else None
    return d_x, d_w_ih, d_b_ih
