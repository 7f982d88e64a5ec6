"""Build, cache and call the compiled step loops (step_kernels.cpp).

The C++ file needs only the C library, so the system's C++ compiler builds it in about a second,
once per machine: the shared library is kept under ``~/.cache/sweeper/kernels`` (or
``$SWEEPER_KERNEL_CACHE``), named by a digest of the source, the compiler, the flags and the
processor, so a shared home directory serves machines of different kinds. It is built for the
processor it runs on (``-march=native``). The matrix products call the BLAS that torch links
(``sgemm_`` / ``dgemm_``, exported by torch's CPU library), so they run at torch's own speed.

Where there is no compiler, the build fails, or torch's library exports no BLAS, ``loaded()``
is None and says why in ``why_not()``; new trials then train with the Python step loops
(training/numerics.py picks the revision).
"""

from __future__ import annotations

import ctypes
import hashlib
import os
import platform
import shutil
import subprocess
import tempfile
from functools import cache
from pathlib import Path

import torch

SOURCE = Path(__file__).with_name("step_kernels.cpp")
FLAGS = ("-O3", "-march=native", "-fPIC", "-shared", "-fno-math-errno")
Tensor = torch.Tensor
_POINTER, _INT, _LONG = ctypes.c_void_p, ctypes.c_int, ctypes.c_long
_SIZES, _STRIDES = [_INT] * 4, [_LONG] * 2  # steps, batch, hidden, features; d_out's strides
_SIGNATURES = {  # the extern "C" functions of step_kernels.cpp: numbers, then buffers
    "gru_forward": _SIZES + [_POINTER] * 11,
    "gru_backward": _SIZES + _STRIDES + [_POINTER] * 16,
    "elman_forward": _SIZES + [_POINTER] * 8,
    "elman_backward": _SIZES + _STRIDES + [_POINTER] * 13,
}
_COUNT, _DOUBLE = ctypes.c_ssize_t, ctypes.c_double
_UPDATES = {  # the optimizer updates: element count, buffers (step last), hyperparameters
    "adam": [_COUNT] + [_POINTER] * 5 + [_DOUBLE] * 5,
    "rmsprop": [_COUNT] + [_POINTER] * 5 + [_DOUBLE] * 5,
    "sgd": [_COUNT] + [_POINTER] * 3 + [_INT] + [_DOUBLE] * 3,
}
_SUFFIX = {torch.float32: "f32", torch.float64: "f64"}


class Kernels:
    """The loaded library's functions, called with contiguous CPU tensors of one dtype."""

    def __init__(self, library: ctypes.CDLL) -> None:
        self._library = library
        for name, argtypes in (_SIGNATURES | _UPDATES).items():
            for suffix in _SUFFIX.values():
                function = getattr(library, f"sweeper_{name}_{suffix}")
                function.argtypes = argtypes
                function.restype = None
        activation = library.sweeper_activation_f32
        activation.argtypes = [ctypes.c_ssize_t, _POINTER, _POINTER, _INT]
        activation.restype = None

    def supports(self, *tensors: Tensor) -> bool:
        """Whether the kernels can take these tensors (float32 or float64, all one, CPU)."""
        first = tensors[0]
        return first.dtype in _SUFFIX and all(
            t.dtype == first.dtype and t.device.type == "cpu" for t in tensors
        )

    def call(
        self, name: str, numbers: tuple[int, ...], *tensors: Tensor | None, strided: int = -1
    ) -> None:
        """``numbers`` (sizes, then strides) and the buffers; None passes a null pointer. Every
        buffer is contiguous, but ``tensors[strided]``, read through the strides in
        ``numbers``, needs only unit stride in its last dimension."""
        given = [t for t in tensors if t is not None]
        for index, t in enumerate(tensors):
            if t is not None and not (t.stride(-1) == 1 if index == strided else t.is_contiguous()):
                raise ValueError(f"{name}: the kernels read every tensor as contiguous")
        function = getattr(self._library, f"sweeper_{name}_{_SUFFIX[given[0].dtype]}")
        function(*numbers, *(None if t is None else t.data_ptr() for t in tensors))

    def update(self, name: str, param: Tensor, *args: Tensor | int | float | None) -> None:
        """One optimizer update of ``param`` in place (its dtype picks the entry); tensors in
        ``args`` (gradient, state, the float32 step count) as pointers, numbers as they are."""
        function = getattr(self._library, f"sweeper_{name}_{_SUFFIX[param.dtype]}")
        values = (a.data_ptr() if isinstance(a, Tensor) else a for a in args)
        function(param.numel(), param.data_ptr(), *values)

    def activation(self, x: Tensor, which: str) -> Tensor:
        """exp, tanh or sigmoid of a float32 tensor by the kernels' own formulas (tests)."""
        x = x.contiguous()
        y = torch.empty_like(x)
        code = ("exp", "tanh", "sigmoid").index(which)
        self._library.sweeper_activation_f32(x.numel(), x.data_ptr(), y.data_ptr(), code)
        return y


def cache_folder() -> Path:
    chosen = os.environ.get("SWEEPER_KERNEL_CACHE")
    if chosen:
        return Path(chosen)
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "sweeper" / "kernels"


def _compiler() -> str | None:
    for name in (os.environ.get("CXX"), "c++", "g++", "clang++"):
        if name and shutil.which(name):
            return name
    return None


def _processor() -> str:
    """What -march=native depends on: the machine and its processor's feature flags."""
    try:
        text = Path("/proc/cpuinfo").read_text()
        flags = next((line for line in text.splitlines() if line.startswith("flags")), "")
    except OSError:
        flags = ""
    return platform.machine() + flags


def _library_path(compiler: str) -> Path:
    version = subprocess.run(
        [compiler, "--version"], capture_output=True, text=True, check=False
    ).stdout
    digest = hashlib.sha256()
    for part in (SOURCE.read_bytes(), " ".join(FLAGS).encode(), version.encode()):
        digest.update(part)
    digest.update(_processor().encode())
    return cache_folder() / f"step_kernels-{digest.hexdigest()[:16]}.so"


def _build(compiler: str, target: Path) -> None:
    """Compile into a temporary file beside the target, then rename it into place, so
    processes building at once never load a half-written library."""
    target.parent.mkdir(parents=True, exist_ok=True)
    handle, temporary = tempfile.mkstemp(suffix=".so", dir=target.parent)
    os.close(handle)
    try:
        command = [compiler, *FLAGS, str(SOURCE), "-o", temporary]
        done = subprocess.run(command, capture_output=True, text=True, check=False)
        if done.returncode != 0:
            raise OSError(done.stderr.strip().splitlines()[-1] if done.stderr else "failed")
        os.replace(temporary, target)
    finally:
        if os.path.exists(temporary):
            os.unlink(temporary)


def _torch_blas() -> tuple[int, int]:
    """Addresses of sgemm_ and dgemm_ in torch's CPU library (the BLAS torch's mm uses)."""
    library = ctypes.CDLL(str(Path(torch.__file__).parent / "lib" / "libtorch_cpu.so"))
    sgemm = ctypes.cast(library.sgemm_, _POINTER).value
    dgemm = ctypes.cast(library.dgemm_, _POINTER).value
    if not sgemm or not dgemm:
        raise AttributeError("sgemm_")
    return sgemm, dgemm


@cache
def _load() -> tuple[Kernels | None, str]:
    if os.environ.get("SWEEPER_KERNELS", "") == "off":
        return None, "SWEEPER_KERNELS=off"
    try:
        sgemm, dgemm = _torch_blas()
    except (OSError, AttributeError):
        return None, "torch's CPU library exports no BLAS sgemm_ here"
    compiler = _compiler()
    if compiler is None:
        return None, "no C++ compiler (c++, g++ or clang++; or set CXX)"
    target = _library_path(compiler)
    try:
        if not target.exists():
            _build(compiler, target)
        library = ctypes.CDLL(str(target))
        library.sweeper_set_gemm(ctypes.c_void_p(sgemm), ctypes.c_void_p(dgemm))
        return Kernels(library), ""
    except (OSError, AttributeError) as error:
        return None, f"building {SOURCE.name} with {compiler} failed: {error}"


def loaded() -> Kernels | None:
    """The compiled step loops, built on first use; None where they cannot be had."""
    return _load()[0]


def why_not() -> str:
    """Why ``loaded()`` is None (empty when it is not)."""
    return _load()[1]
