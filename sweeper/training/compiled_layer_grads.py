"""What the compiled backward of a layer writes into: one set of buffers for Elman and GRU.

step_kernels.cpp's backward entries take, after their own scratch buffers, the gradients of
the inputs (or null), W_ih, b_ih, W_hh, b_hh and the first state, in that order; autograd
wants them back as ``(d x, d h0, d W_ih, d W_hh, d b_ih, d b_hh, None for kernels)``.
"""

from __future__ import annotations

from dataclasses import dataclass

import torch

Tensor = torch.Tensor


def flat_inputs(x: Tensor) -> Tensor:
    """A window's time-first inputs [T, B, F] as the contiguous [T*B, F] the kernels read."""
    steps, batch, features = x.shape
    return x.reshape(steps * batch, features).contiguous()


def output_grad(d_out: Tensor) -> tuple[Tensor, tuple[int, int]]:
    """The outputs' gradient as the kernels read it (unit stride in its last dimension, any
    strides over time and batch) and those two strides."""
    if d_out.stride(-1) != 1:
        d_out = d_out.contiguous()
    return d_out, (d_out.stride(0), d_out.stride(1))


@dataclass(frozen=True)
class LayerGrads:
    d_x: Tensor | None
    d_w_ih: Tensor
    d_b_ih: Tensor
    d_w_hh: Tensor
    d_b_hh: Tensor
    carry: Tensor

    @classmethod
    def empty(
        cls, flat: Tensor, w_ih: Tensor, w_hh: Tensor, batch: int, need_x: bool
    ) -> LayerGrads:
        """Buffers for a layer over ``batch`` sequences whose inputs ``flat`` [T*B, F] may or
        may not need a gradient."""
        gates_hidden, hidden = w_hh.shape
        return cls(
            d_x=flat.new_empty(flat.shape) if need_x else None,
            d_w_ih=torch.empty_like(w_ih),
            d_b_ih=flat.new_empty(gates_hidden),
            d_w_hh=torch.empty_like(w_hh),
            d_b_hh=flat.new_empty(gates_hidden),
            carry=flat.new_empty(batch, hidden),
        )

    def buffers(self) -> tuple[Tensor | None, ...]:
        """In the order of the kernels' backward entries."""
        return self.d_x, self.d_w_ih, self.d_b_ih, self.d_w_hh, self.d_b_hh, self.carry

    def returned(self, need: tuple[bool, ...], x_shape: torch.Size) -> tuple[Tensor | None, ...]:
        """What autograd asked for, in its order."""
        d_x = self.d_x.view(x_shape) if self.d_x is not None else None
        ordered = (d_x, self.carry, self.d_w_ih, self.d_w_hh, self.d_b_ih, self.d_b_hh)
        return (*(g if wanted else None for g, wanted in zip(ordered, need, strict=False)), None)
