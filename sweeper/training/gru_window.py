"""One GRU layer over a window, with a hand-written backward through the window.

Time-first tensors: inputs [T, B, F], state [B, H], outputs [T, B, H]. The weights and gate
order (reset r, update z, new n) are nn.GRU's own (torch docs):

    r = sigmoid(x W_ir^T + b_ir + h W_hr^T + b_hr)
    z = sigmoid(x W_iz^T + b_iz + h W_hz^T + b_hz)
    n = tanh(x W_in^T + b_in + r * (h W_hn^T + b_hn))
    h' = (1 - z) * n + z * h

The window's input products are one matrix product; a step is two recurrent products (r and
z together, then n) and four in-place gate operations, nothing recorded. The backward
precomputes every factor that does not depend on the incoming gradient for the whole window,
so a reverse step is one product and two elementwise operations; the weight gradients are one
product each over the window.

With the compiled kernels (``kernels``, training/compiled_steps.py) each direction is one call
of step_kernels.cpp: the same products inside, a step one product and one fused loop each way.
"""

from __future__ import annotations

from typing import Any

import torch
from torch.autograd.function import once_differentiable

from sweeper.training.compiled_layer_grads import LayerGrads, flat_inputs, output_grad
from sweeper.training.compiled_steps import Kernels
from sweeper.training.window_grads import input_grads, recurrent_grads

Tensor = torch.Tensor


def gru_steps(
    x: Tensor, h0: Tensor, w_ih: Tensor, w_hh: Tensor, b_ih: Tensor, b_hh: Tensor
) -> tuple[Tensor, ...]:
    """Outputs, last state, gates [T, B, 3H] (r, z, n after their nonlinearities) and n's
    recurrent products ``h W_hn^T + b_hn`` [T, B, H], every step's, for the backward."""
    gates = _input_products(x, w_ih, b_ih, b_hh)
    steps, batch, hidden = gates.shape[0], gates.shape[1], h0.shape[-1]
    products = gates.new_empty(steps, batch, hidden)
    out = gates.new_empty(steps, batch, hidden)
    w_rz, w_n = w_hh[: 2 * hidden].t(), w_hh[2 * hidden :].t()
    b_n = b_hh[2 * hidden :]
    # per-step views made once, outside the loop: [B, 2H] for r and z, [B, H] for n
    rz, n = (part.unbind(0) for part in gates.split((2 * hidden, hidden), dim=2))
    r, z = gates[..., :hidden].unbind(0), gates[..., hidden : 2 * hidden].unbind(0)
    h = h0
    for t, (product, h_out) in enumerate(zip(products.unbind(0), out.unbind(0), strict=True)):
        rz[t].addmm_(h, w_rz).sigmoid_()
        torch.addmm(b_n, h, w_n, out=product)
        n_t = n[t].addcmul_(r[t], product).tanh_()
        h = torch.lerp(n_t, h, z[t], out=h_out)
    return out, h, gates, products


def _input_products(x: Tensor, w_ih: Tensor, b_ih: Tensor, b_hh: Tensor) -> Tensor:
    """Every step's input products at once [T, B, 3H], r's and z's recurrent biases folded
    in; the step loops turn them into the gates in place."""
    steps, batch, features = x.shape
    hidden = w_ih.shape[0] // 3
    bias = b_ih + torch.cat((b_hh[: 2 * hidden], b_hh.new_zeros(hidden)))
    gates = torch.addmm(bias, x.reshape(steps * batch, features), w_ih.t())
    return gates.view(steps, batch, 3 * hidden)


def _usable(kernels: Kernels | None, *tensors: Tensor) -> Kernels | None:
    return kernels if kernels is not None and kernels.supports(*tensors) else None


class GRUWindow(torch.autograd.Function):
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
        ctx.kernels = _usable(kernels, x, h0, w_ih, w_hh, b_ih, b_hh)
        if ctx.kernels is not None:
            return _compiled_forward(ctx, x, h0, w_ih, w_hh, b_ih, b_hh)
        out, h, gates, products = gru_steps(x, h0, w_ih, w_hh, b_ih, b_hh)
        ctx.save_for_backward(x, h0, w_ih, w_hh, gates, products, out)
        return out, h.clone()

    @staticmethod
    @once_differentiable
    def backward(ctx: Any, d_out: Tensor, d_last: Tensor) -> tuple[Tensor | None, ...]:
        if ctx.kernels is not None:
            return _compiled_backward(ctx, d_out, d_last)
        x, h0, w_ih, w_hh, gates, products, out = ctx.saved_tensors
        steps, batch, hidden = out.shape
        z = gates[..., hidden : 2 * hidden]
        factors, to_n = _factors(gates, products, h0, out)
        factors = factors.view(steps, batch, 3, hidden)
        # d_h[t]: the whole gradient reaching h_t, completed one step ahead of its use
        d_h = torch.add(d_out, 0, out=torch.empty_like(out))  # time-first, contiguous
        d_h[-1].add_(d_last)
        # each step's factors become its recurrent products' gradients in place (d_rec)
        d_rec = factors.view(steps, batch, 3 * hidden)
        g, g3 = d_h.unbind(0), d_h.unsqueeze(2).unbind(0)
        rec, rec3, z_s = d_rec.unbind(0), factors.unbind(0), z.unbind(0)
        for t in range(steps - 1, 0, -1):
            rec3[t].mul_(g3[t])
            g[t - 1].addcmul_(g[t], z_s[t]).addmm_(rec[t], w_hh)
        rec3[0].mul_(g3[0])
        carry = torch.mm(rec[0], w_hh).addcmul_(g[0], z_s[0])
        need = ctx.needs_input_grad
        d_w_hh, d_b_hh = recurrent_grads(need, h0, out, d_rec)
        # the input products' gradients: the recurrent ones, but n's is not scaled by r
        torch.mul(d_h, to_n, out=d_rec[..., 2 * hidden :])
        d_x, d_w_ih, d_b_ih = input_grads(need, x, d_rec, w_ih)
        return d_x, carry if need[1] else None, d_w_ih, d_w_hh, d_b_ih, d_b_hh, None


def _compiled_forward(
    ctx: Any, x: Tensor, h0: Tensor, w_ih: Tensor, w_hh: Tensor, b_ih: Tensor, b_hh: Tensor
) -> tuple[Tensor, Tensor]:
    """The window through step_kernels.cpp: one call, every product and step inside."""
    steps, batch, features = x.shape
    hidden = w_hh.shape[1]
    flat, w_ih = flat_inputs(x), w_ih.contiguous()
    gates = flat.new_empty(steps, batch, 3 * hidden)
    products = flat.new_empty(steps, batch, hidden)
    states = flat.new_empty(steps + 1, batch, hidden)  # h0, then every step's state
    last, scratch = flat.new_empty(batch, hidden), flat.new_empty(batch, 3 * hidden)
    buffers = (flat, w_ih, b_ih, w_hh, b_hh, h0, gates, products, states, last, scratch)
    ctx.kernels.call("gru_forward", (steps, batch, hidden, features), *buffers)
    ctx.save_for_backward(flat, w_ih, w_hh, gates, products, states)
    return states[1:], last


def _compiled_backward(ctx: Any, d_out: Tensor, d_last: Tensor) -> tuple[Tensor | None, ...]:
    flat, w_ih, w_hh, gates, products, states = ctx.saved_tensors
    steps, batch, hidden = d_out.shape
    d_out, strides = output_grad(d_out)
    need = ctx.needs_input_grad
    grads = LayerGrads.empty(flat, w_ih, w_hh, batch, need[0])
    d_h, d_rec = flat.new_empty(steps, batch, hidden), torch.empty_like(gates)  # scratch
    numbers = (steps, batch, hidden, flat.shape[1], *strides)
    inputs = (flat, w_ih, w_hh, gates, products, states, d_out, d_last.contiguous(), d_h, d_rec)
    ctx.kernels.call("gru_backward", numbers, *inputs, *grads.buffers(), strided=6)
    return grads.returned(need, torch.Size((steps, batch, flat.shape[1])))


def _factors(gates: Tensor, products: Tensor, h0: Tensor, out: Tensor) -> tuple[Tensor, Tensor]:
    """The factors from d h' to the recurrent products' gradients, [T, B, 3H] (r: to_n * ghn *
    r(1-r), z: (h_prev - n) * z(1-z), n: to_n * r), and to_n = (1 - z)(1 - n^2), the factor
    from d h' to n's pre-activation gradient. Written through ``out=`` and in place on new
    tensors, so the saved ones stay intact (a retained graph can run backward again)."""
    r, z, n = gates.split(out.shape[-1], dim=2)
    factors = torch.empty_like(gates)
    f_r, f_z, f_n = factors.split(out.shape[-1], dim=2)
    to_n = torch.mul(n, n).neg_().add_(1).mul_(1 - z)
    torch.mul(to_n, r, out=f_n)
    torch.mul(f_n, products, out=f_r).mul_(1 - r)
    torch.neg(n, out=f_z)
    f_z[0].add_(h0)  # h_prev - n
    f_z[1:].add_(out[:-1])
    f_z.mul_(z).mul_(1 - z)
    return factors, to_n
