"""One GRU layer over a window, with a hand-written backward through the window.

Time-first tensors: inputs [T, B, F], state [B, H], outputs [T, B, H]. The weights and gate
order (reset r, update z, new n) are nn.GRU's own (torch docs):

    r = sigmoid(x W_ir^T + b_ir + h W_hr^T + b_hr)
    z = sigmoid(x W_iz^T + b_iz + h W_hz^T + b_hz)
    n = tanh(x W_in^T + b_in + r * (h W_hn^T + b_hn))
    h' = (1 - z) * n + z * h

The window's input products are one matrix product; a step is one recurrent product and five
in-place gate operations, nothing recorded. The backward precomputes every factor that does
not depend on the incoming gradient for the whole window, so a reverse step is one product
and three elementwise operations; the weight gradients are one product each over the window.
"""

from __future__ import annotations

from typing import Any

import torch
from torch.autograd.function import once_differentiable

from sweeper.training.window_grads import window_grads

Tensor = torch.Tensor


class GRUWindow(torch.autograd.Function):
    """``apply(x, h0, w_ih, w_hh, b_ih, b_hh) -> (outputs, last state)``."""

    @staticmethod
    def forward(
        ctx: Any, x: Tensor, h0: Tensor, w_ih: Tensor, w_hh: Tensor, b_ih: Tensor, b_hh: Tensor
    ) -> tuple[Tensor, Tensor]:
        steps, batch, features = x.shape
        hidden = h0.shape[-1]
        # input products of every step at once; they become the gates in place below
        gates = torch.addmm(b_ih, x.reshape(steps * batch, features), w_ih.t())
        gates = gates.view(steps, batch, 3 * hidden)
        products = torch.empty_like(gates)
        out = gates.new_empty(steps, batch, hidden)
        recurrent = w_hh.t()
        # per-step views made once, outside the loop: [B, 2H] for r and z, [B, H] for n
        rz, n = (part.unbind(0) for part in gates.split((2 * hidden, hidden), dim=2))
        products_rz, products_n = (
            part.unbind(0) for part in products.split((2 * hidden, hidden), dim=2)
        )
        z = gates[..., hidden : 2 * hidden].unbind(0)
        h = h0
        for t, (product, h_out) in enumerate(zip(products.unbind(0), out.unbind(0), strict=True)):
            torch.addmm(b_hh, h, recurrent, out=product)
            r_t = rz[t].add_(products_rz[t]).sigmoid_()[:, :hidden]
            n_t = n[t].addcmul_(r_t, products_n[t]).tanh_()
            h = torch.lerp(n_t, h, z[t], out=h_out)
        ctx.save_for_backward(x, h0, w_ih, w_hh, gates, products, out)
        return out, h.clone()

    @staticmethod
    @once_differentiable
    def backward(ctx: Any, d_out: Tensor, d_last: Tensor) -> tuple[Tensor | None, ...]:
        x, h0, w_ih, w_hh, gates, products, out = ctx.saved_tensors
        steps, batch, hidden = out.shape
        r, z, n = gates.split(hidden, dim=2)
        previous = torch.cat((h0.unsqueeze(0), out[:-1]))
        # d n_pre / d h' and the factors turning d h' into the recurrent products' gradients
        to_n = (1 - z) * (1 - n.square())
        factors = torch.cat(
            (
                to_n * products[..., 2 * hidden :] * r * (1 - r),
                (previous - n) * z * (1 - z),
                to_n * r,
            ),
            dim=2,
        ).view(steps, batch, 3, hidden)
        # d_h[t]: the whole gradient reaching h_t, completed one step ahead of its use
        d_h = torch.add(d_out, 0, out=torch.empty_like(out))  # time-first, contiguous
        d_h[-1].add_(d_last)
        d_rec = torch.empty_like(gates)
        g, g3 = d_h.unbind(0), d_h.unsqueeze(2).unbind(0)
        f3, z_s = factors.unbind(0), z.unbind(0)
        rec, rec3 = d_rec.unbind(0), d_rec.view(steps, batch, 3, hidden).unbind(0)
        for t in range(steps - 1, 0, -1):
            torch.mul(g3[t], f3[t], out=rec3[t])
            g[t - 1].addcmul_(g[t], z_s[t]).addmm_(rec[t], w_hh)
        torch.mul(g3[0], f3[0], out=rec3[0])
        carry = torch.mm(rec[0], w_hh).addcmul_(g[0], z_s[0])
        # the input products' gradients: the recurrent ones, but n's is not scaled by r
        d_in = d_rec.clone()
        torch.mul(d_h, to_n, out=d_in[..., 2 * hidden :])
        return window_grads(ctx.needs_input_grad, x, previous, d_in, d_rec, w_ih, carry)
