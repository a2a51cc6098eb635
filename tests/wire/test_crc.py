"""CRC-16/IBM-3740: catalogue check value and agreement with an independent library."""

import crcmod.predefined
from hypothesis import given, settings
from hypothesis import strategies as st

from rigbench.wire.crc import CRC_CHECK, crc16, crc16_bitwise


def test_check_value_from_catalogue():
    # G. Cook, "Catalogue of parametrised CRC algorithms", CRC-16/IBM-3740: check=0x29B1.
    assert crc16(b"123456789") == 0x29B1
    assert crc16_bitwise(b"123456789") == 0x29B1
    assert CRC_CHECK == 0x29B1


# crcmod (general-purpose CRC library from PyPI) names this CRC "crc-ccitt-false":
# poly 0x11021, init 0xFFFF, not reflected, xorOut 0.
_REF = crcmod.predefined.mkCrcFun("crc-ccitt-false")


@settings(max_examples=300)
@given(st.binary(max_size=300))
def test_agrees_with_crcmod(data):
    assert crc16(data) == _REF(data) == crc16_bitwise(data)
