"""The design header says exactly what one output integer means: the output LSB in output
units (NUM / DEN), the output rate (NUM / DEN samples/s) and the measuring range in LSB.

Outside references: Python's standard ``fractions`` module applied to the decimal text as
written in the spec file (not to the parsed floats), and gcc, which evaluates the macros in
a compiled program.
"""

from __future__ import annotations

import re
import subprocess
from fractions import Fraction
from math import ceil, floor
from pathlib import Path

import pytest
from conftest import require_tools

from hosttool.codegen.render import render_headers, write_headers
from hosttool.design.resolve import make_design
from hosttool.spec.schema import load_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"

PROGRAM = """#include <stdio.h>
#include HEADER
#define V(name) CAT(PREFIX, name)
#define CAT(a, b) CAT_(a, b)
#define CAT_(a, b) a##_##b
int main(void)
{
    printf("%ld %ld %ld %ld %ld %ld\\n", (long)V(OUTPUT_LSB_NUM), (long)V(OUTPUT_LSB_DEN),
           (long)V(OUTPUT_RATE_NUM), (long)V(OUTPUT_RATE_DEN), (long)V(RANGE_MIN_LSB),
           (long)V(RANGE_MAX_LSB));
    return 0;
}
"""


def _written(text: str, key: str) -> Fraction:
    """The value of ``key = <decimal>`` exactly as written in the spec's text."""
    found = re.search(rf"^{key}\s*=\s*([-+0-9.eE_]+)", text, re.M)
    assert found is not None, key
    return Fraction(found.group(1).replace("_", ""))


def _compiled(spec: Path, tmp_path: Path) -> list[int]:
    require_tools("host", run=True)
    design = make_design(load_spec(spec))
    write_headers(render_headers(design), tmp_path, force=True)
    main = tmp_path / "main.c"
    main.write_text(PROGRAM)
    exe = tmp_path / "main"
    prefix = design.spec.name.upper()
    subprocess.run(["gcc", "-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic",
                    f"-DHEADER=\"{design.spec.name}_design.h\"", f"-DPREFIX={prefix}",
                    f"-I{tmp_path}", str(main), "-o", str(exe)], check=True)
    out = subprocess.run([str(exe)], capture_output=True, text=True, check=True).stdout
    return [int(v) for v in out.split()]


def _variant(tmp_path: Path, resolution: str, rate: str) -> Path:
    text = (EXAMPLES / "hive_scale.toml").read_text()
    text = re.sub(r"^resolution = 0\.01 ", f"resolution = {resolution} ", text, flags=re.M)
    text = re.sub(r"^data_rate_sps = 10\.0 ", f"data_rate_sps = {rate} ", text, flags=re.M)
    path = tmp_path / "variant.toml"
    path.write_text(text)
    return path


@pytest.mark.parametrize("spec, full_key, bipolar", [
    (EXAMPLES / "hive_scale.toml", "capacity", False),
    (EXAMPLES / "fatigue_coupon.toml", "strain_range_ue", True),
    ("variant", "capacity", False),
])
def test_output_meaning_macros(spec: Path | str, full_key: str, bipolar: bool,
                               tmp_path: Path) -> None:
    path = _variant(tmp_path, "0.03", "7.5") if spec == "variant" else Path(spec)
    text = path.read_text()
    lsb = _written(text, "resolution")
    rate = _written(text, "data_rate_sps") / make_design(load_spec(path)).decimation
    full = _written(text, full_key)
    low, high = (-full if bipolar else Fraction(0)) / lsb, full / lsb
    got = _compiled(path, tmp_path / "build")
    assert got == [lsb.numerator, lsb.denominator, rate.numerator, rate.denominator,
                   floor(low), ceil(high)]


def test_comments_say_the_exact_values(tmp_path: Path) -> None:
    design = make_design(load_spec(_variant(tmp_path, "0.03", "7.5")))
    text = render_headers(design)[0].text
    assert "/* One output LSB = 0.03 kg, exactly 3/100: result r means r x NUM / DEN kg. */" \
        in text
    assert "/* Output rate 7.5 samples/s, exactly NUM / DEN (ADC 7.5 samples/s, decimation 1)" \
        in text
    # 200 kg / 0.03 kg is 6666 2/3 LSB: the range is widened to whole LSB and says so
    assert " * Measuring range 0 .. 200 kg, in output LSB (widened to whole LSB).\n" in text
    assert "#define HIVE_SCALE_RANGE_MAX_LSB 6667\n" in text
