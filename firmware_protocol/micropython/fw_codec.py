"""Byte-level codecs of the wire protocol: COBS and CRC-32/ISO-HDLC.

Plain MicroPython-compatible Python (runs unchanged under CPython for the tests).

COBS follows Cheshire and Baker, "Consistent Overhead Byte Stuffing" (1999): the data is cut at every zero byte
into blocks of at most 254 non-zero bytes, each led by a code byte (block length + 1); a code of 0xFF means "254
bytes, no zero follows". The encoder emits no trailing 0x01 after a final full block, the same output as the
common Python ``cobs`` package, so frames are byte-identical with the host's.

The CRC is the one of zlib/Ethernet/PNG (PROTOCOL.md §1). ``binascii.crc32`` is used where the port has it; else
a 256-entry table is walked. The table keeps the 32-bit register as two 16-bit halves because MicroPython's small
integers hold only 31 bits: a full-width register would allocate a long integer on every byte.
"""

try:
    from micropython import const
except ImportError:  # CPython

    def const(value):
        return value


try:
    import binascii

    _native_crc32 = binascii.crc32
except (ImportError, AttributeError):  # port built without binascii.crc32
    _native_crc32 = None

_MAX_RUN = const(254)
_POLY_REFLECTED = const(0xEDB88320)


class CobsError(ValueError):
    """Raised when bytes are not a valid COBS encoding."""


def cobs_encode(data):
    """Return the COBS encoding of ``data`` (bytes-like), without the trailing zero delimiter.

    ``bytes.find`` walks the zero-free runs at C speed, so the Python loop runs once per block, not per byte.
    """
    data = bytes(data)
    size = len(data)
    out = bytearray()
    start = 0
    while True:
        zero = data.find(b"\x00", start)
        end = size if zero < 0 else zero
        full_block = False
        while end - start >= _MAX_RUN:
            out.append(0xFF)
            out.extend(data[start : start + _MAX_RUN])
            start += _MAX_RUN
            full_block = True
        if zero < 0:
            # A run that ended exactly on a full block at the end of the data needs no closing block.
            if not (full_block and start == size):
                out.append(end - start + 1)
                out.extend(data[start:end])
            return bytes(out)
        out.append(end - start + 1)
        out.extend(data[start:end])
        start = zero + 1


def cobs_decode(encoded):
    """Return the data whose COBS encoding (no delimiter) is ``encoded``; raise `CobsError` if it is not valid."""
    encoded = bytes(encoded)
    size = len(encoded)
    if size == 0:
        raise CobsError("empty COBS frame")
    if encoded.find(b"\x00") >= 0:
        raise CobsError("zero byte inside a COBS frame")
    out = bytearray()
    pos = 0
    while pos < size:
        code = encoded[pos]
        end = pos + code
        if end > size:
            raise CobsError("COBS block runs past the end of the frame")
        out.extend(encoded[pos + 1 : end])
        pos = end
        if code != 0xFF and pos < size:
            out.append(0)
    return bytes(out)


def _make_tables():
    high = []
    low = []
    for index in range(256):
        register = index
        for _ in range(8):
            if register & 1:
                register = (register >> 1) ^ _POLY_REFLECTED
            else:
                register >>= 1
        high.append(register >> 16)
        low.append(register & 0xFFFF)
    return high, low


_TABLE_HIGH, _TABLE_LOW = _make_tables()


def crc32_table(data, crc=0):
    """CRC-32/ISO-HDLC of ``data`` by table lookup; ``crc`` is the CRC of preceding data, for running use."""
    crc ^= 0xFFFFFFFF
    high = crc >> 16
    low = crc & 0xFFFF
    table_high = _TABLE_HIGH
    table_low = _TABLE_LOW
    for byte in data:
        index = (low ^ byte) & 0xFF
        low = ((low >> 8) | ((high & 0xFF) << 8)) ^ table_low[index]
        high = (high >> 8) ^ table_high[index]
    return ((high << 16) | low) ^ 0xFFFFFFFF


def crc32(data, crc=0):
    """CRC-32/ISO-HDLC of ``data`` (check value 0xCBF43926 for b"123456789"), by the port's C routine if any."""
    if _native_crc32 is not None:
        return _native_crc32(data, crc) & 0xFFFFFFFF
    return crc32_table(data, crc)
