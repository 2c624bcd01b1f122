"""``word_order: ABCD / CDAB / BADC / DCBA``: the usual spellings of a 32-bit register layout.

IEEE 754-2019 (binary32) [published]: 21.5 = 1.34375 x 2^4: sign 0, exponent 4 + 127 = 131
(0x83), fraction 0.34375 = 0x2C0000 / 2^23, so the bits are 0x41AC0000; bytes A B C D =
0x41 0xAC 0x00 0x00, most significant first. The letter names, in the order the bytes
arrive on the wire, are common practice in device manuals, no single source.
"""

from __future__ import annotations

import struct

import pytest
from pydantic import ValidationError

from roomloop.config.models import Bms, ModbusInput
from roomloop.io.codec import decode_raw

# The registers each layout puts 21.5 into, from the byte names (A = 0x41, B = 0xAC, C = D = 0).
LAYOUTS = {
    "ABCD": [0x41AC, 0x0000],
    "CDAB": [0x0000, 0x41AC],
    "BADC": [0xAC41, 0x0000],
    "DCBA": [0x0000, 0xAC41],
}


def _point(**keys: object) -> ModbusInput:
    return ModbusInput.model_validate(
        {"type": "modbus-input", "name": "t", "link": "io", "address": 0, "data_type": "float32"}
        | keys
    )


def test_the_reference_bit_pattern() -> None:
    # IEEE 754 binary32, independently of roomloop: struct packs big-endian binary32.
    assert struct.pack(">f", 21.5) == bytes([0x41, 0xAC, 0x00, 0x00])


@pytest.mark.parametrize(("letters", "registers"), LAYOUTS.items())
def test_each_spelling_decodes_21_5(letters: str, registers: list[int]) -> None:
    point = _point(word_order=letters)
    assert decode_raw(registers, "float32", point.word_order, point.byte_order) == 21.5
    lower = _point(word_order=letters.lower())
    assert (lower.word_order, lower.byte_order) == (point.word_order, point.byte_order)


def test_the_four_spellings_are_four_layouts() -> None:
    pairs = {(p.word_order, p.byte_order) for p in (_point(word_order=k) for k in LAYOUTS)}
    assert len(pairs) == 4
    assert (_point(word_order="CDAB").word_order, _point(word_order="CDAB").byte_order) == (
        "little",
        "big",
    )


def test_a_matching_byte_order_is_fine_and_a_conflicting_one_refused() -> None:
    assert _point(word_order="BADC", byte_order="little").byte_order == "little"
    with pytest.raises(ValidationError, match="word_order CDAB sets byte_order 'big' already"):
        _point(word_order="CDAB", byte_order="little")


def test_other_letter_orders_are_refused_with_the_four() -> None:
    with pytest.raises(ValidationError, match="ABCD, CDAB, BADC or DCBA"):
        _point(word_order="BACD")


@pytest.mark.parametrize("word_order", ["XYZW", "ABC", "Big", "middle"])
def test_an_unknown_layout_is_refused_naming_the_words_and_the_letters(word_order: str) -> None:
    with pytest.raises(ValidationError) as caught:
        _point(word_order=word_order)
    message = str(caught.value)
    assert f"word_order {word_order!r} is not a register layout" in message
    assert "big or little" in message and "ABCD, CDAB, BADC or DCBA" in message
    assert "input should be" not in message.lower()


@pytest.mark.parametrize(("letters", "word"), [("ABCD", "big"), ("CDAB", "little")])
def test_bms_takes_abcd_and_cdab_as_a_point_does(letters: str, word: str) -> None:
    bms = Bms.model_validate({"data_type": "float32", "word_order": letters})
    assert bms.word_order == word == _point(word_order=letters).word_order


@pytest.mark.parametrize("letters", ["BADC", "DCBA"])
def test_bms_refuses_a_byte_swapped_layout_by_name(letters: str) -> None:
    with pytest.raises(ValidationError, match=f"word_order {letters} swaps the bytes"):
        Bms.model_validate({"data_type": "float32", "word_order": letters})


def test_bms_refuses_an_unknown_layout_naming_both_spellings() -> None:
    with pytest.raises(ValidationError, match=r"use big \(ABCD\) or little \(CDAB\)"):
        Bms.model_validate({"data_type": "float32", "word_order": "XYZW"})
