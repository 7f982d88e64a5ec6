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


def window_grads(
    need: Sequence[bool],
    x: Tensor,
    previous: Tensor,
    d_input: Tensor,
    d_recurrent: Tensor,
    w_ih: Tensor,
    d_h0: Tensor,
) -> tuple[Tensor | None, ...]:
    """Gradients for ``(x, h0, w_ih, w_hh, b_ih, b_hh)``, None where ``need`` says so.

    ``previous`` [T, B, H] is the state each step started from; ``d_input`` and
    ``d_recurrent`` [T, B, G*H] are the gradients of the input and recurrent products.
    """
    steps, batch, features = x.shape
    rows = steps * batch
    d_in = d_input.reshape(rows, -1)
    d_rec = d_recurrent.reshape(rows, -1)
    d_x = torch.mm(d_in, w_ih).view(steps, batch, features) if need[0] else None
    d_w_ih = torch.mm(d_in.t(), x.reshape(rows, features)) if need[2] else None
    d_w_hh = torch.mm(d_rec.t(), previous.reshape(rows, -1)) if need[3] else None
    d_b_ih = d_in.sum(0) if need[4] else None
    d_b_hh = d_rec.sum(0) if need[5] else None
    return d_x, d_h0 if need[1] else None, d_w_ih, d_w_hh, d_b_ih, d_b_hh
