"""C99 text of the link's byte level on the board side: little-endian field access, CRC, COBS, framing, receiver.

Part of the generated link source (:func:`compensator.firmware.link_c.render_link_c`):

* CRC-16/IBM-3740 (poly 0x1021, init 0xFFFF, check value 0x29B1) and
  CRC-32 (the zlib polynomial, check value 0xCBF43926) for uploads;
* COBS encoding and decoding (Cheshire and Baker, 1999), a frame builder
  (version, kind, sequence number, payload, CRC-16) and a byte-at-a-time
  receiver that resynchronises at the next zero, like the Python codec
  (:mod:`compensator.link.codec`).
"""

from __future__ import annotations

__all__ = ["c_framing_source", "c_receiver_source"]


def c_framing_source(name: str) -> str:
    """Static field access (``put_u8`` ... ``get_i32``), ``NAME_crc16``, ``NAME_crc32``, COBS and ``NAME_frame``.

    Parameters
    ----------
    name : str
        Prefix of the C symbols (already checked).
    """
    up = name.upper()
    return f"""static size_t put_u8(uint8_t *p, uint8_t v) {{ p[0] = v; return 1u; }}
static size_t put_u16(uint8_t *p, uint16_t v) {{ p[0] = (uint8_t)v; p[1] = (uint8_t)(v >> 8); return 2u; }}
static size_t put_u32(uint8_t *p, uint32_t v)
{{
    p[0] = (uint8_t)v; p[1] = (uint8_t)(v >> 8); p[2] = (uint8_t)(v >> 16); p[3] = (uint8_t)(v >> 24);
    return 4u;
}}
static size_t put_u64(uint8_t *p, uint64_t v)
{{
    put_u32(p, (uint32_t)v);
    put_u32(p + 4, (uint32_t)(v >> 32));
    return 8u;
}}
static size_t put_i32(uint8_t *p, int32_t v) {{ return put_u32(p, (uint32_t)v); }}
static uint8_t get_u8(const uint8_t *p) {{ return p[0]; }}
static uint16_t get_u16(const uint8_t *p) {{ return (uint16_t)(p[0] | (uint16_t)(p[1] << 8)); }}
static uint32_t get_u32(const uint8_t *p)
{{
    return (uint32_t)p[0] | ((uint32_t)p[1] << 8) | ((uint32_t)p[2] << 16) | ((uint32_t)p[3] << 24);
}}
static uint64_t get_u64(const uint8_t *p) {{ return (uint64_t)get_u32(p) | ((uint64_t)get_u32(p + 4) << 32); }}
static int32_t get_i32(const uint8_t *p)
{{
    uint32_t u = get_u32(p);
    /* two's complement without implementation-defined conversion */
    return u <= (uint32_t)INT32_MAX ? (int32_t)u : -(int32_t)(~u) - 1;
}}

uint16_t {name}_crc16(const uint8_t *data, size_t n)
{{
    uint16_t crc = 0xFFFFu;
    size_t i;
    int b;
    for (i = 0; i < n; ++i) {{
        crc = (uint16_t)(crc ^ (uint16_t)(data[i] << 8));
        for (b = 0; b < 8; ++b) {{
            crc = (crc & 0x8000u) ? (uint16_t)((uint16_t)(crc << 1) ^ 0x1021u) : (uint16_t)(crc << 1);
        }}
    }}
    return crc;
}}

uint32_t {name}_crc32(const uint8_t *data, size_t n)
{{
    uint32_t crc = 0xFFFFFFFFu;
    size_t i;
    int b;
    for (i = 0; i < n; ++i) {{
        crc ^= data[i];
        for (b = 0; b < 8; ++b) {{
            crc = (crc & 1u) ? (crc >> 1) ^ 0xEDB88320u : crc >> 1;
        }}
    }}
    return ~crc;
}}

size_t {name}_cobs_encode(const uint8_t *in, size_t n, uint8_t *out)
{{
    size_t r = 0, w = 1, code_pos = 0;
    uint8_t code = 1;
    while (r < n) {{
        if (in[r] == 0u) {{
            out[code_pos] = code;
            code = 1;
            code_pos = w++;
            ++r;
        }} else {{
            out[w++] = in[r++];
            ++code;
            if (code == 0xFFu && r < n) {{
                out[code_pos] = code;
                code = 1;
                code_pos = w++;
            }}
        }}
    }}
    out[code_pos] = code;
    return w;
}}

int {name}_cobs_decode(const uint8_t *in, size_t n, uint8_t *out, size_t cap, size_t *out_n)
{{
    size_t r = 0, w = 0, i;
    while (r < n) {{
        uint8_t code = in[r++];
        if (code == 0u || (size_t)code - 1u > n - r) return -1;
        for (i = 1; i < code; ++i) {{
            if (in[r] == 0u || w >= cap) return -1;
            out[w++] = in[r++];
        }}
        if (r < n && code < 0xFFu) {{
            if (w >= cap) return -1;
            out[w++] = 0u;
        }}
    }}
    *out_n = w;
    return 0;
}}

size_t {name}_frame(uint8_t kind, uint16_t seq, const uint8_t *payload, size_t len, uint8_t *out)
{{
    uint8_t body[{up}_MAX_FRAME_BYTES];
    uint16_t crc;
    size_t n;
    if (len > {up}_MAX_PAYLOAD_BYTES) len = {up}_MAX_PAYLOAD_BYTES;
    body[0] = {up}_PROTOCOL_VERSION;
    body[1] = kind;
    put_u16(body + 2, seq);
    if (len) memcpy(body + 4, payload, len);
    crc = {name}_crc16(body, len + 4u);
    put_u16(body + 4 + len, crc);
    n = {name}_cobs_encode(body, len + 6u, out);
    out[n++] = 0u;
    return n;
}}"""


def c_receiver_source(name: str) -> str:
    """``NAME_rx_init`` and ``NAME_rx_byte``: the receiver state machine, one byte at a time.

    Parameters
    ----------
    name : str
        Prefix of the C symbols (already checked).
    """
    up = name.upper()
    return f"""void {name}_rx_init({name}_rx *rx)
{{
    rx->count = 0u;
    rx->skipping = 0u;
    rx->payload_len = 0u;
}}

int {name}_rx_byte({name}_rx *rx, uint8_t byte)
{{
    uint8_t body[{up}_MAX_ENCODED_BYTES];
    size_t n;
    if (byte != 0u) {{
        if (rx->skipping) return {up}_RX_NONE;
        if (rx->count >= {up}_MAX_ENCODED_BYTES - 1u) {{
            rx->count = 0u;
            rx->skipping = 1u;
            return {up}_RX_ERR_TOO_LONG;
        }}
        rx->enc[rx->count++] = byte;
        return {up}_RX_NONE;
    }}
    if (rx->skipping) {{
        rx->skipping = 0u;
        rx->count = 0u;
        return {up}_RX_NONE;
    }}
    if (rx->count == 0u) return {up}_RX_NONE;
    n = rx->count;
    rx->count = 0u;
    if ({name}_cobs_decode(rx->enc, n, body, sizeof body, &n) != 0) return {up}_RX_ERR_COBS;
    if (n < 6u) return {up}_RX_ERR_SHORT;
    if ({name}_crc16(body, n - 2u) != get_u16(body + n - 2u)) return {up}_RX_ERR_CRC;
    rx->version = body[0];
    rx->kind = body[1];
    rx->seq = get_u16(body + 2);
    rx->crc = get_u16(body + n - 2u);
    rx->payload_len = n - 6u;
    memcpy(rx->payload, body + 4, rx->payload_len);
    return {up}_RX_FRAME;
}}"""
