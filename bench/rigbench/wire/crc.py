"""CRC-16/IBM-3740 (a.k.a. CRC-16/CCITT-FALSE), the frame check of the line protocol.

PROTOCOL.md §2: poly 0x1021, init 0xFFFF, no input or output reflection, no final XOR;
check value 0x29B1 over ASCII "123456789" (G. Cook, Catalogue of parametrised CRC
algorithms). ``binascii.crc_hqx`` computes exactly this with init 0xFFFF.
"""

from binascii import crc_hqx

CRC_INIT = 0xFFFF
CRC_POLY = 0x1021
CRC_CHECK = 0x29B1


def crc16(data: bytes) -> int:
    """Return the CRC-16/IBM-3740 of ``data`` as an int in 0..0xFFFF."""
    return crc_hqx(data, CRC_INIT)


def crc16_bitwise(data: bytes) -> int:
    """Slow reference implementation, bit by bit, for firmware authors and tests."""
    crc = CRC_INIT
    for byte in data:
        crc ^= byte << 8
        for _ in range(8):
            crc = ((crc << 1) ^ CRC_POLY) & 0xFFFF if crc & 0x8000 else (crc << 1) & 0xFFFF
    return crc
