"""The same header bytes on every machine.

Everything the templates print is a function of integers and exact values, or of a float
rounded on a grid fixed by its format's step (render_context.on_grid, the proof figures).
Two checks against the outside world: the same render under two OpenBLAS kernels, chosen
with OPENBLAS_CORETYPE (OpenBLAS's own documented variable), in fresh processes; and the
same bytes when every float of the Design is moved by a few units in the last place
(numpy.spacing), which stands for another BLAS, numpy, scipy or CPU.
"""

from __future__ import annotations

import dataclasses
import os
import subprocess
import sys
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from hosttool.codegen.render import render_headers
from hosttool.design.resolve import make_design
from hosttool.spec.schema import load_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
NAMES = ["hive_scale", "fatigue_coupon"]


def _nudge(value: float, ulps: int) -> float:
    """``value`` moved by ``ulps`` units in the last place of max(|value|, 1): the size of
    the noise a least-squares solve leaves on a coefficient of a problem scaled near 1 (a
    coefficient that should be 0 comes out as 1e-17, not as 0 times (1 + 1e-16))."""
    return float(value) + ulps * float(np.spacing(max(abs(float(value)), 1.0)))


def _perturbed(obj: Any, ulps: int, seen: dict[int, Any]) -> Any:
    """``obj`` with every float (also inside tuples, arrays and frozen dataclasses) moved by
    ``ulps`` units in the last place; integers, strings and the spec stay as they are."""
    key = id(obj)
    if key in seen:
        return seen[key]
    out: Any
    if isinstance(obj, bool) or isinstance(obj, int | str) or obj is None:
        out = obj
    elif isinstance(obj, float):
        out = _nudge(obj, ulps) if obj != 0.0 else obj
    elif isinstance(obj, np.ndarray):
        out = (np.array([_nudge(v, ulps) if v != 0 else v for v in obj.ravel()])
               .reshape(obj.shape) if obj.dtype.kind == "f" else obj)
    elif isinstance(obj, tuple):
        out = type(obj)(_perturbed(v, ulps, seen) for v in obj)
    elif isinstance(obj, list):
        out = [_perturbed(v, ulps, seen) for v in obj]
    elif isinstance(obj, dict):
        out = {k: _perturbed(v, ulps, seen) for k, v in obj.items()}
    elif dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        if type(obj).__name__ == "Spec":
            out = obj           # the input: exact by definition
        else:
            changes = {f.name: _perturbed(getattr(obj, f.name), ulps, seen)
                       for f in dataclasses.fields(obj) if f.init}
            out = dataclasses.replace(obj, **changes)
    else:
        out = obj
    seen[key] = out
    return out


@pytest.mark.parametrize("name", NAMES)
@pytest.mark.parametrize("ulps", [-3, 2])
def test_headers_do_not_move_with_float_noise(name: str, ulps: int) -> None:
    design = make_design(load_spec(EXAMPLES / f"{name}.toml"))
    moved = _perturbed(design, ulps, {})
    assert moved.scale.ideal != design.scale.ideal    # the perturbation took hold
    for a, b in zip(render_headers(design), render_headers(moved), strict=True):
        assert a.text == b.text, a.name


_RENDER = ("import sys; from hosttool.design.resolve import make_design; "
           "from hosttool.codegen.render import render_headers; "
           "from hosttool.spec.schema import load_spec; "
           "sys.stdout.write(''.join(h.text for h in "
           "render_headers(make_design(load_spec(sys.argv[1])))))")


@pytest.mark.parametrize("name", NAMES)
def test_headers_equal_under_two_openblas_kernels(name: str) -> None:
    texts = []
    for kernel in (None, "Haswell", "Prescott"):
        env = dict(os.environ)
        env.pop("OPENBLAS_CORETYPE", None)
        env.pop("OPENBLAS_L2_SIZE", None)
        if kernel:
            env["OPENBLAS_CORETYPE"] = kernel
        run = subprocess.run([sys.executable, "-c", _RENDER, str(EXAMPLES / f"{name}.toml")],
                             env=env, capture_output=True, text=True, check=True)
        texts.append(run.stdout)
    assert texts[0] == texts[1] == texts[2]
    assert "#endif" in texts[0]
