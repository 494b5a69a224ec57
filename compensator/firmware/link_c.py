"""C99 emission of the board's side of the link protocol: framing, CRC, message packing and a dispatcher.

The generated code reads the same layout table as the Python codec
(:mod:`compensator.link.protocol`), so each message's bytes are the same at
both ends. It has:

* CRC-16/IBM-3740 (poly 0x1021, init 0xFFFF, check value 0x29B1) and
  CRC-32 (the zlib polynomial, check value 0xCBF43926) for uploads;
* COBS encoding and decoding (Cheshire and Baker, 1999) and a byte-at-a-time
  receiver that resynchronises at the next zero, like the Python codec;
* a struct, ``pack`` and ``unpack`` per message, and a union with generic
  ``NAME_pack``/``NAME_unpack`` by kind;
* a dispatcher that answers each request through handlers the builder
  implements (set the bias, read the ADC, apply an image, ...), replays the
  cached reply to a retried request (same sequence number, kind and CRC)
  instead of executing it twice, and assembles chunked uploads into a
  staging buffer that is handed over only when complete and checked.

Integer-only, no dynamic memory, bounded buffers, warning-free with
``-std=c99 -Wall -Wextra -Werror`` (and ``-pedantic -Wconversion``).
"""

from __future__ import annotations

import re

from compensator.errors import ModelError
from compensator.fileio import write_files_atomic
from compensator.link import protocol as p
from compensator.provenance import c_banner

__all__ = ["render_link_c", "write_link_c", "c_struct_name", "DEFAULT_LINK_NAME"]

#: Default prefix of the generated symbols and file stem.
DEFAULT_LINK_NAME = "board_link"
_NAME_RE = re.compile(r"^[a-z][a-z0-9_]{0,23}$")

_CTYPE = {"u8": "uint8_t", "u16": "uint16_t", "u32": "uint32_t", "u64": "uint64_t", "i32": "int32_t"}
_SIZE = {"u8": 1, "u16": 2, "u32": 4, "u64": 8, "i32": 4}


def c_struct_name(message_class) -> str:
    """Snake-case stem of a message class for C (``SetBias`` -> ``set_bias``).

    Parameters
    ----------
    message_class : type
        A message class of :mod:`compensator.link.protocol`.
    """
    return p.message_name(message_class)


_ALL = (*p.MESSAGE_TYPES, p.Reply)
#: Requests answered by a Reply (commands), and the requests answered by reports.
_COMMANDS = [c for c in p.REQUEST_TYPES if p.message_type(p.reply_kind(c.KIND)) is p.Reply]


def _fields(cls, name: str) -> str:
    lines = []
    for field, t in cls.LAYOUT:
        if t in _CTYPE:
            lines.append(f"    {_CTYPE[t]} {field};")
        elif t == "hash":
            lines.append(f"    uint8_t {field}[32];")
        elif t == "text":
            lines.append(f"    uint8_t {field}_len;\n    char {field}[{p.MAX_TEXT_BYTES}];")
        elif t == "data":
            lines.append(f"    uint8_t {field}_len;\n    uint8_t {field}[{p.MAX_CHUNK_BYTES}];")
        else:
            base = t.split("[")[0]
            lines.append(f"    {_CTYPE[base]} {field}[{p.FAULT_SLOTS}];")
    if not lines:
        lines.append("    uint8_t unused_;  /* no payload */")
    return f"typedef struct {{\n" + "\n".join(lines) + f"\n}} {name}_{c_struct_name(cls)};\n"


def _pack(cls, name: str) -> str:
    stem = c_struct_name(cls)
    body = []
    for field, t in cls.LAYOUT:
        if t in _CTYPE:
            body.append(f"    n += put_{t}(out + n, m->{field});")
        elif t == "hash":
            body.append(f"    memcpy(out + n, m->{field}, 32u);\n    n += 32u;")
        elif t in ("text", "data"):
            limit = p.MAX_TEXT_BYTES if t == "text" else p.MAX_CHUNK_BYTES
            body.append(f"    {{\n        uint8_t k = m->{field}_len;\n        if (k > {limit}u) k = {limit}u;\n"
                        f"        out[n++] = k;\n        memcpy(out + n, m->{field}, k);\n        n += k;\n    }}")
        else:
            base = t.split("[")[0]
            body.append(f"    for (i = 0; i < {p.FAULT_SLOTS}; ++i) n += put_{base}(out + n, m->{field}[i]);")
    uses_i = any("[" in t for _, t in cls.LAYOUT)
    head = f"size_t {name}_pack_{stem}(const {name}_{stem} *m, uint8_t *out)\n{{\n    size_t n = 0;\n"
    if uses_i:
        head += "    int i;\n"
    if not cls.LAYOUT:
        head += "    (void)m;\n    (void)out;\n"
    return head + "\n".join(body) + ("\n" if body else "") + "    return n;\n}\n"


def _unpack(cls, name: str) -> str:
    stem = c_struct_name(cls)
    fixed = all(t not in ("text", "data") for _, t in cls.LAYOUT)
    head = f"int {name}_unpack_{stem}(const uint8_t *in, size_t len, {name}_{stem} *m)\n{{\n"
    if not cls.LAYOUT:
        return head + "    (void)in;\n    memset(m, 0, sizeof *m);\n    return len == 0u ? 0 : -1;\n}\n"
    body = ["    size_t n = 0;"]
    if any("[" in t for _, t in cls.LAYOUT):
        body.append("    int i;")
    if fixed:
        size = sum(p.fixed_size(t) for _, t in cls.LAYOUT)
        body.append(f"    if (len != {size}u) return -1;")
    for field, t in cls.LAYOUT:
        if t in _CTYPE:
            if not fixed:
                body.append(f"    if (len - n < {_SIZE[t]}u) return -1;")
            body.append(f"    m->{field} = get_{t}(in + n);\n    n += {_SIZE[t]}u;")
        elif t == "hash":
            if not fixed:
                body.append("    if (len - n < 32u) return -1;")
            body.append(f"    memcpy(m->{field}, in + n, 32u);\n    n += 32u;")
        elif t in ("text", "data"):
            limit = p.MAX_TEXT_BYTES if t == "text" else p.MAX_CHUNK_BYTES
            body.append(f"    if (n >= len) return -1;\n    m->{field}_len = in[n++];\n"
                        f"    if (m->{field}_len > {limit}u || len - n < m->{field}_len) return -1;")
            if t == "text":
                body.append(f"    for (i = 0; i < (int)m->{field}_len; ++i) {{\n"
                            f"        if (in[n + (size_t)i] < 0x20u || in[n + (size_t)i] > 0x7Eu) return -1;\n"
                            f"        m->{field}[i] = (char)in[n + (size_t)i];\n    }}")
            else:
                body.append(f"    memcpy(m->{field}, in + n, m->{field}_len);")
            body.append(f"    n += m->{field}_len;")
        else:
            base = t.split("[")[0]
            body.append(f"    for (i = 0; i < {p.FAULT_SLOTS}; ++i) {{\n        m->{field}[i] = get_{base}(in + n);\n"
                        f"        n += {_SIZE[base]}u;\n    }}")
    if any(t == "text" for _, t in cls.LAYOUT) and not any("[" in t for _, t in cls.LAYOUT):
        body.insert(1, "    int i;")
    body.append("    return n == len ? 0 : -1;")
    return head + "\n".join(body) + "\n}\n"


def _header(name: str, banner: str) -> str:
    up = name.upper()
    kinds = "\n".join(f"#define {up}_KIND_{k.name} 0x{int(k):02X}u" for k in p.Kind)
    results = "\n".join(f"#define {up}_RESULT_{r.name} {int(r)}u" for r in p.Result)
    modes = "\n".join(f"#define {up}_MODE_{m.name} {int(m)}u" for m in p.Mode)
    targets = "\n".join(f"#define {up}_TARGET_{t.name} {int(t)}u" for t in p.UploadTarget)
    structs = "\n".join(_fields(c, name) for c in _ALL)
    members = "\n".join(f"    {name}_{c_struct_name(c)} {c_struct_name(c)};" for c in _ALL)
    protos = "\n".join(
        f"size_t {name}_pack_{c_struct_name(c)}(const {name}_{c_struct_name(c)} *m, uint8_t *out);\n"
        f"int {name}_unpack_{c_struct_name(c)}(const uint8_t *in, size_t len, {name}_{c_struct_name(c)} *m);"
        for c in _ALL)
    handlers = "\n".join(
        f"    uint8_t (*{c_struct_name(c)})(void *ctx, const {name}_{c_struct_name(c)} *req, {name}_reply *reply);"
        for c in _COMMANDS if c not in (p.Heartbeat, p.UploadBegin, p.UploadChunk, p.UploadCommit))
    return f"""{banner}
#ifndef {up}_H
#define {up}_H

#include <stddef.h>
#include <stdint.h>

/*
 * Board side of the link protocol (see docs/protocol.md).
 * Frame: COBS(version | kind | seq LE16 | payload | CRC-16/IBM-3740 LE16) 0x00.
 * CAUTION: the handlers you implement drive a bias supply of tens of volts
 * and possibly a cooler; keep hardware limits that do not depend on this
 * code, and follow local codes and licensed practice.
 */

#define {up}_PROTOCOL_VERSION {p.PROTOCOL_VERSION}u
#define {up}_MAX_PAYLOAD_BYTES {p.MAX_PAYLOAD_BYTES}u
#define {up}_MAX_FRAME_BYTES {p.MAX_FRAME_BYTES}u
#define {up}_MAX_ENCODED_BYTES {p.MAX_ENCODED_BYTES}u
#define {up}_MAX_CHUNK_BYTES {p.MAX_CHUNK_BYTES}u
#define {up}_MAX_TEXT_BYTES {p.MAX_TEXT_BYTES}u
#define {up}_ABSENT_I32 INT32_MIN
#define {up}_ABSENT_U32 UINT32_C(0xFFFFFFFF)
/* staging buffer for uploads; a board with less memory may define a smaller one */
#ifndef {up}_MAX_IMAGE_BYTES
#define {up}_MAX_IMAGE_BYTES {p.MAX_IMAGE_BYTES}u
#endif
#define {up}_CHUNK_SLOTS (({up}_MAX_IMAGE_BYTES + {up}_MAX_CHUNK_BYTES - 1u) / {up}_MAX_CHUNK_BYTES)

{kinds}

{results}

{modes}

{targets}

/* receiver events */
#define {up}_RX_NONE 0
#define {up}_RX_FRAME 1
#define {up}_RX_ERR_COBS 2
#define {up}_RX_ERR_SHORT 3
#define {up}_RX_ERR_CRC 4
#define {up}_RX_ERR_TOO_LONG 5

{structs}
typedef union {{
{members}
}} {name}_message;

{protos}

/* unpack by kind: 0 ok, -1 malformed payload, -2 unknown kind */
int {name}_unpack(uint8_t kind, const uint8_t *in, size_t len, {name}_message *m);
/* pack by kind: payload length, or 0 for an unknown kind (check {name}_known_kind) */
size_t {name}_pack(uint8_t kind, const {name}_message *m, uint8_t *out);
int {name}_known_kind(uint8_t kind);

uint16_t {name}_crc16(const uint8_t *data, size_t n);
uint32_t {name}_crc32(const uint8_t *data, size_t n);
size_t {name}_cobs_encode(const uint8_t *in, size_t n, uint8_t *out);
int {name}_cobs_decode(const uint8_t *in, size_t n, uint8_t *out, size_t cap, size_t *out_n);
/* a whole frame: header, payload, CRC, COBS and the delimiter into out[{up}_MAX_ENCODED_BYTES] */
size_t {name}_frame(uint8_t kind, uint16_t seq, const uint8_t *payload, size_t len, uint8_t *out);

typedef struct {{
    uint8_t enc[{up}_MAX_ENCODED_BYTES];
    size_t count;
    uint8_t skipping;
    /* the last frame, valid after {up}_RX_FRAME */
    uint8_t version;
    uint8_t kind;
    uint16_t seq;
    uint16_t crc;
    uint8_t payload[{up}_MAX_FRAME_BYTES];
    size_t payload_len;
}} {name}_rx;

void {name}_rx_init({name}_rx *rx);
/* feed one received byte; returns {up}_RX_* */
int {name}_rx_byte({name}_rx *rx, uint8_t byte);

/* what the builder implements; every pointer must be set */
typedef struct {{
    void *ctx;
    void (*write)(void *ctx, const uint8_t *bytes, size_t n);
    /* any valid frame from the host (feeds the heartbeat watchdog) */
    void (*host_seen)(void *ctx);
    void (*identify)(void *ctx, {name}_identity_report *out);
    void (*read_status)(void *ctx, {name}_status_report *out);
    void (*read_faults)(void *ctx, {name}_fault_report *out);
{handlers}
    /* a complete, checked image: apply it at once or reject it (RESULT_OK or RESULT_INVALID_IMAGE) */
    uint8_t (*apply_image)(void *ctx, uint8_t target, const uint8_t *image, uint32_t size, {name}_reply *reply);
}} {name}_handlers;

typedef struct {{
    {name}_rx rx;
    const {name}_handlers *h;
    /* the last reply, replayed for a retried request */
    uint8_t have_last;
    uint8_t last_kind;
    uint16_t last_seq;
    uint16_t last_crc;
    uint8_t last_reply[{up}_MAX_ENCODED_BYTES];
    size_t last_reply_len;
    uint16_t telemetry_seq;
    /* upload staging */
    uint8_t up_target;
    uint32_t up_size;
    uint32_t up_crc;
    uint8_t up_have[{up}_CHUNK_SLOTS];
    uint8_t up_image[{up}_MAX_IMAGE_BYTES];
    uint8_t done_target;
    uint32_t done_size;
    uint32_t done_crc;
    /* counters */
    uint32_t frames_ok;
    uint32_t frames_bad;
    uint32_t replays;
}} {name}_link;

void {name}_init({name}_link *link, const {name}_handlers *h);
/* feed received bytes; replies go out through h->write */
void {name}_receive({name}_link *link, const uint8_t *bytes, size_t n);
/* stream one unsolicited telemetry sample */
void {name}_send_telemetry({name}_link *link, const {name}_telemetry_report *t);

#endif /* {up}_H */
"""


def _source(name: str, banner: str) -> str:
    up = name.upper()
    packs = "\n".join(_pack(c, name) + "\n" + _unpack(c, name) for c in _ALL)
    unpack_cases, pack_cases = [], []
    for c in p.MESSAGE_TYPES:
        stem = c_struct_name(c)
        unpack_cases.append(f"    case 0x{int(c.KIND):02X}u: return {name}_unpack_{stem}(in, len, &m->{stem});")
        pack_cases.append(f"    case 0x{int(c.KIND):02X}u: return {name}_pack_{stem}(&m->{stem}, out);")
    reply_kinds = [p.reply_kind(c.KIND) for c in _COMMANDS]
    reply_cases = "\n".join(f"    case 0x{k:02X}u:" for k in reply_kinds)
    commands = []
    for c in _COMMANDS:
        if c in (p.Heartbeat, p.UploadBegin, p.UploadChunk, p.UploadCommit):
            continue
        stem = c_struct_name(c)
        commands.append(f"    case 0x{int(c.KIND):02X}u:\n"
                        f"        reply.result = link->h->{stem}(link->h->ctx, &req.{stem}, &reply);\n"
                        f"        break;")
    command_cases = "\n".join(commands)
    return f"""{banner}
#include <string.h>
#include "{name}.h"

static size_t put_u8(uint8_t *p, uint8_t v) {{ p[0] = v; return 1u; }}
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
}}

{packs}
int {name}_unpack(uint8_t kind, const uint8_t *in, size_t len, {name}_message *m)
{{
    switch (kind) {{
{chr(10).join(unpack_cases)}
{reply_cases}
        return {name}_unpack_reply(in, len, &m->reply);
    default:
        return -2;
    }}
}}

size_t {name}_pack(uint8_t kind, const {name}_message *m, uint8_t *out)
{{
    switch (kind) {{
{chr(10).join(pack_cases)}
{reply_cases}
        return {name}_pack_reply(&m->reply, out);
    default:
        return 0u;
    }}
}}

int {name}_known_kind(uint8_t kind)
{{
    {name}_message m;
    memset(&m, 0, sizeof m);
    return {name}_unpack(kind, NULL, 0u, &m) != -2;
}}

void {name}_rx_init({name}_rx *rx)
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
}}

void {name}_init({name}_link *link, const {name}_handlers *h)
{{
    memset(link, 0, sizeof *link);
    {name}_rx_init(&link->rx);
    link->h = h;
}}

static void send_reply({name}_link *link, uint8_t kind, uint16_t seq, const {name}_message *m, int cache)
{{
    uint8_t payload[{up}_MAX_PAYLOAD_BYTES];
    size_t len = {name}_pack(kind, m, payload);
    size_t n = {name}_frame(kind, seq, payload, len, link->last_reply);
    link->last_reply_len = n;
    link->have_last = (uint8_t)(cache != 0);
    link->h->write(link->h->ctx, link->last_reply, n);
}}

static void refuse({name}_link *link, uint8_t kind, uint16_t seq, uint8_t result, int32_t value)
{{
    {name}_message m;
    memset(&m, 0, sizeof m);
    m.refusal.request_kind = kind;
    m.refusal.result = result;
    m.refusal.value = value;
    send_reply(link, {up}_KIND_REFUSAL, seq, &m, 0);
}}

static uint8_t upload_begin({name}_link *link, const {name}_upload_begin *q, {name}_reply *r)
{{
    if (q->target != {up}_TARGET_TABLE && q->target != {up}_TARGET_COEFFICIENTS) return {up}_RESULT_BAD_REQUEST;
    if (q->size_bytes == 0u || q->size_bytes > {up}_MAX_IMAGE_BYTES) {{
        r->value = (int32_t){up}_MAX_IMAGE_BYTES;
        return {up}_RESULT_REFUSED_LIMIT;
    }}
    link->up_target = q->target;
    link->up_size = q->size_bytes;
    link->up_crc = q->crc32;
    memset(link->up_have, 0, sizeof link->up_have);
    return {up}_RESULT_OK;
}}

static uint8_t upload_chunk({name}_link *link, const {name}_upload_chunk *q, {name}_reply *r)
{{
    uint32_t end = q->offset_bytes + q->data_len;
    if (q->target != link->up_target || link->up_target == 0u || q->offset_bytes % {up}_MAX_CHUNK_BYTES != 0u
        || q->offset_bytes >= link->up_size || end > link->up_size
        || (q->data_len != {up}_MAX_CHUNK_BYTES && end != link->up_size)) {{
        return {up}_RESULT_UPLOAD_INCOMPLETE;
    }}
    memcpy(link->up_image + q->offset_bytes, q->data, q->data_len);
    link->up_have[q->offset_bytes / {up}_MAX_CHUNK_BYTES] = 1u;
    r->value = (int32_t)end;
    return {up}_RESULT_OK;
}}

static uint8_t upload_commit({name}_link *link, const {name}_upload_commit *q, {name}_reply *r)
{{
    uint32_t slot, slots;
    uint8_t result;
    if (link->done_target != 0u && q->target == link->done_target && q->size_bytes == link->done_size
        && q->crc32 == link->done_crc && link->up_target == 0u) {{
        r->value = (int32_t)q->size_bytes;
        return {up}_RESULT_OK;  /* applied already: a repeat is harmless */
    }}
    if (link->up_target == 0u || q->target != link->up_target) return {up}_RESULT_UPLOAD_INCOMPLETE;
    if (q->size_bytes != link->up_size || q->crc32 != link->up_crc) return {up}_RESULT_UPLOAD_CHECKSUM;
    slots = (link->up_size + {up}_MAX_CHUNK_BYTES - 1u) / {up}_MAX_CHUNK_BYTES;
    for (slot = 0; slot < slots; ++slot) {{
        if (!link->up_have[slot]) {{
            r->value = (int32_t)(slot * {up}_MAX_CHUNK_BYTES);
            return {up}_RESULT_UPLOAD_INCOMPLETE;
        }}
    }}
    if ({name}_crc32(link->up_image, link->up_size) != link->up_crc) return {up}_RESULT_UPLOAD_CHECKSUM;
    result = link->h->apply_image(link->h->ctx, link->up_target, link->up_image, link->up_size, r);
    if (result == {up}_RESULT_OK) {{
        link->done_target = link->up_target;
        link->done_size = link->up_size;
        link->done_crc = link->up_crc;
        link->up_target = 0u;
        r->value = (int32_t)link->done_size;
    }}
    return result;
}}

static void dispatch({name}_link *link)
{{
    {name}_rx *rx = &link->rx;
    {name}_message req, rep;
    {name}_reply reply;
    int status;
    uint8_t kind = rx->kind;
    link->frames_ok++;
    link->h->host_seen(link->h->ctx);
    if (kind >= 0x80u) return;  /* reports travel the other way */
    if (link->have_last && rx->seq == link->last_seq && kind == link->last_kind && rx->crc == link->last_crc) {{
        link->replays++;
        link->h->write(link->h->ctx, link->last_reply, link->last_reply_len);
        return;
    }}
    if (rx->version != {up}_PROTOCOL_VERSION) {{
        refuse(link, kind, rx->seq, {up}_RESULT_BAD_VERSION, (int32_t){up}_PROTOCOL_VERSION);
        return;
    }}
    status = {name}_unpack(kind, rx->payload, rx->payload_len, &req);
    if (status == -2) {{
        refuse(link, kind, rx->seq, {up}_RESULT_UNKNOWN_KIND, 0);
        return;
    }}
    if (status != 0) {{
        refuse(link, kind, rx->seq, {up}_RESULT_BAD_REQUEST, 0);
        return;
    }}
    memset(&rep, 0, sizeof rep);
    memset(&reply, 0, sizeof reply);
    switch (kind) {{
    case {up}_KIND_IDENTIFY:
        link->h->identify(link->h->ctx, &rep.identity_report);
        break;
    case {up}_KIND_READ_STATUS:
        link->h->read_status(link->h->ctx, &rep.status_report);
        break;
    case {up}_KIND_READ_FAULTS:
        link->h->read_faults(link->h->ctx, &rep.fault_report);
        break;
    case {up}_KIND_HEARTBEAT:
        reply.result = {up}_RESULT_OK;
        break;
    case {up}_KIND_UPLOAD_BEGIN:
        reply.result = upload_begin(link, &req.upload_begin, &reply);
        break;
    case {up}_KIND_UPLOAD_CHUNK:
        reply.result = upload_chunk(link, &req.upload_chunk, &reply);
        break;
    case {up}_KIND_UPLOAD_COMMIT:
        reply.result = upload_commit(link, &req.upload_commit, &reply);
        break;
{command_cases}
    default:
        refuse(link, kind, rx->seq, {up}_RESULT_UNKNOWN_KIND, 0);
        return;
    }}
    if (kind != {up}_KIND_IDENTIFY && kind != {up}_KIND_READ_STATUS && kind != {up}_KIND_READ_FAULTS) {{
        rep.reply = reply;
    }}
    link->last_seq = rx->seq;
    link->last_kind = kind;
    link->last_crc = rx->crc;
    send_reply(link, (uint8_t)(kind | 0x80u), rx->seq, &rep, 1);
}}

void {name}_receive({name}_link *link, const uint8_t *bytes, size_t n)
{{
    size_t i;
    for (i = 0; i < n; ++i) {{
        int event = {name}_rx_byte(&link->rx, bytes[i]);
        if (event == {up}_RX_FRAME) {{
            dispatch(link);
        }} else if (event != {up}_RX_NONE) {{
            link->frames_bad++;
        }}
    }}
}}

void {name}_send_telemetry({name}_link *link, const {name}_telemetry_report *t)
{{
    uint8_t payload[{up}_MAX_PAYLOAD_BYTES];
    uint8_t out[{up}_MAX_ENCODED_BYTES];
    size_t len = {name}_pack_telemetry_report(t, payload);
    size_t n = {name}_frame({up}_KIND_TELEMETRY, link->telemetry_seq++, payload, len, out);
    link->h->write(link->h->ctx, out, n);
}}
"""


def render_link_c(*, name: str = DEFAULT_LINK_NAME, profiles=(), settings: dict | None = None) -> dict[str, str]:
    """Render the board side of the link as a C99 header and source.

    Parameters
    ----------
    name : str
        Prefix of every C symbol and the file stem (lower-case C identifier, at most 24 characters).
    profiles : sequence of profile objects
        Named with their hashes in the banner.
    settings : dict, optional
        Written in the banner.

    Returns
    -------
    dict of str to str
        ``{"<name>.h": text, "<name>.c": text}``; deterministic.

    Raises
    ------
    ModelError
        ``name`` is not a valid identifier.
    """
    if not isinstance(name, str) or not _NAME_RE.match(name):
        raise ModelError(f"{name!r} must be a C identifier of at most 24 lower-case letters, digits and "
                         "underscores, starting with a letter", key="name")
    profiles = tuple(profiles)
    settings = {"protocol_version": str(p.PROTOCOL_VERSION), **(settings or {})}
    return {
        f"{name}.h": _header(name, c_banner(f"link protocol, board side {name}: declarations", profiles, settings)),
        f"{name}.c": _source(name, c_banner(f"link protocol, board side {name}: codec and dispatcher", profiles,
                                            settings)),
    }


def write_link_c(directory, *, name: str = DEFAULT_LINK_NAME, profiles=(), settings: dict | None = None,
                 overwrite: bool = False):
    """Render the link C files and write them into ``directory`` (all or nothing).

    Parameters
    ----------
    directory : str or path-like
        Created when missing.
    name, profiles, settings
        As for :func:`render_link_c`.
    overwrite : bool
        Replace existing files.

    Returns
    -------
    list of Path
    """
    return write_files_atomic(directory, render_link_c(name=name, profiles=profiles, settings=settings),
                              overwrite=overwrite, what="C output")
