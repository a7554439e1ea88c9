"""The format identity of a design: exactly what gives a calibration block's integers their
meaning, and nothing else.

A calibration block holds integers (zero offset, span multiplier, linearisation and temperature
coefficients) that mean something only together with the formats they were made for: the ADC's
codes and front end, the guard bits, the scale shift, the linearisation's form and
normalisation, the temperature arithmetic, the output step and unit. ``meaning_items`` lists
those, each as canonical text; the identity is the SHA-256 of that list. Edits that leave
every item alone (description, limits, filters that keep the guard bits, the calibration plan,
noise figures ...) keep every block made before them valid; an edit that moves one item is a
different design for the blocks, and ``differences`` names it.

Limits are not meaning: the span multiplier's limit (from the span tolerance and the nominal
sensitivity), like the offset's, bounds what the range proof covers, and every loader checks
each block's constants against the limits of the design in force (out of range: refused as
such). A datasheet sensitivity or tolerance edit therefore keeps the blocks whose constants
still lie inside the new limits.

The block layer (formats/calblock.py) adds its own layout version as one more item. The
list is documented in DEVELOPERS.md, "Format identity"; tests check that each item moves the
identity and that edits outside the list do not.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass

from hosttool.design.resolve import LIN_FRAC, Design

#: First line of the hashed text; a new way of writing the items gets a new tag.
IDENTITY_TAG = "hosttool format identity 1"
#: Bytes of the SHA-256 kept in the block and the headers.
IDENTITY_BYTES = 8
#: Text of an item that does not apply to a design (no linearisation, no temperature).
ABSENT = "none"


@dataclass(frozen=True)
class IdentityItem:
    """One item of the identity: a stable key and its value as canonical text."""

    key: str
    value: str


@dataclass(frozen=True)
class FormatIdentity:
    """The items and their digest (first IDENTITY_BYTES bytes of the SHA-256)."""

    items: tuple[IdentityItem, ...]

    @property
    def text(self) -> str:
        """The hashed text: the tag, then one ``key = value`` line per item, LF line ends."""
        return IDENTITY_TAG + "\n" + "".join(f"{i.key} = {i.value}\n" for i in self.items)

    @property
    def digest(self) -> bytes:
        """First IDENTITY_BYTES bytes of the SHA-256 of ``text``."""
        return hashlib.sha256(self.text.encode("utf-8")).digest()[:IDENTITY_BYTES]

    @property
    def hex(self) -> str:
        """The digest as lower-case hex (16 digits)."""
        return self.digest.hex()

    def as_dict(self) -> dict[str, str]:
        """key -> value, in the list's order."""
        return {i.key: i.value for i in self.items}

    def extended(self, *items: IdentityItem) -> FormatIdentity:
        """The same identity with more items appended (the block layer's own)."""
        return FormatIdentity(self.items + items)


def _real(value: float) -> str:
    """A float as the shortest text that reads back to the same double (repr): exact and
    the same on every machine."""
    return repr(float(value))


def _input_scale(design: Design) -> str:
    """What one ADC count is in bridge terms: PGA gain, and the excitation over the reference
    unless the excitation is the reference (ratiometric)."""
    exc = design.spec.excitation
    gain = f"PGA {design.budget.pga_gain}"
    if exc.ratiometric:
        return f"ratiometric, {gain}"
    return f"excitation {_real(exc.voltage_v)} V on reference {_real(exc.reference_v)} V, {gain}"


def meaning_items(design: Design) -> tuple[IdentityItem, ...]:
    """The items of the design that give a block's integers their meaning, in fixed order."""
    lin, temp = design.linearisation, design.temperature
    items = [
        ("adc.bits", str(design.spec.adc.bits)),
        ("adc.input_scale", _input_scale(design)),
        ("chain.guard_bits", str(design.guard_bits)),
        ("scale.shift", str(design.scale.shift)),
        ("coefficient.frac_bits", str(LIN_FRAC)),
        ("linearisation.form", lin.mode if lin else ABSENT),
        ("linearisation.count", str(len(lin.coeffs)) if lin else "0"),
        ("linearisation.norm_shift", str(lin.norm_shift) if lin else ABSENT),
        ("temperature.zero_shift", str(temp.zero_shift) if temp else ABSENT),
        ("temperature.span_shift", str(temp.span_shift) if temp else ABSENT),
        ("temperature.reference_centi", str(temp.reference_centi) if temp else ABSENT),
        ("temperature.clamp_centi", f"{temp.min_centi} .. {temp.max_centi}" if temp
         else ABSENT),
        ("output.resolution", _real(design.spec.output.resolution)),
        ("output.unit", design.spec.sensor.unit),
    ]
    return tuple(IdentityItem(k, v) for k, v in items)


def design_identity(design: Design) -> FormatIdentity:
    """The design's part of the format identity (the block layer appends its layout)."""
    return FormatIdentity(meaning_items(design))


def differences(old: dict[str, str], new: dict[str, str]) -> list[str]:
    """``key old -> new`` for every item that differs (or is only on one side), in order."""
    keys = list(old) + [k for k in new if k not in old]
    return [f"{k} {old.get(k, 'absent')} -> {new.get(k, 'absent')}" for k in keys
            if old.get(k) != new.get(k)]
