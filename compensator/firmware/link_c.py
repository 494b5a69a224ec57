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
from compensator.firmware.link_c_framing import c_framing_source, c_receiver_source
from compensator.firmware.link_c_messages import (
    COMMANDS,
    MESSAGES,
    c_message_pack,
    c_message_struct,
    c_message_unpack,
    c_struct_name,
)
from compensator.link import protocol as p
from compensator.provenance import c_banner

__all__ = ["render_link_c", "write_link_c", "c_struct_name", "DEFAULT_LINK_NAME"]

#: Default prefix of the generated symbols and file stem.
DEFAULT_LINK_NAME = "board_link"
_NAME_RE = re.compile(r"^[a-z][a-z0-9_]{0,23}$")


def _header(name: str, banner: str) -> str:
    up = name.upper()
    kinds = "\n".join(f"#define {up}_KIND_{k.name} 0x{int(k):02X}u" for k in p.Kind)
    results = "\n".join(f"#define {up}_RESULT_{r.name} {int(r)}u" for r in p.Result)
    modes = "\n".join(f"#define {up}_MODE_{m.name} {int(m)}u" for m in p.Mode)
    targets = "\n".join(f"#define {up}_TARGET_{t.name} {int(t)}u" for t in p.UploadTarget)
    structs = "\n".join(c_message_struct(c, name) for c in MESSAGES)
    members = "\n".join(f"    {name}_{c_struct_name(c)} {c_struct_name(c)};" for c in MESSAGES)
    protos = "\n".join(
        f"size_t {name}_pack_{c_struct_name(c)}(const {name}_{c_struct_name(c)} *m, uint8_t *out);\n"
        f"int {name}_unpack_{c_struct_name(c)}(const uint8_t *in, size_t len, {name}_{c_struct_name(c)} *m);"
        for c in MESSAGES)
    handlers = "\n".join(
        f"    uint8_t (*{c_struct_name(c)})(void *ctx, const {name}_{c_struct_name(c)} *req, {name}_reply *reply);"
        for c in COMMANDS if c not in (p.Heartbeat, p.UploadBegin, p.UploadChunk, p.UploadCommit))
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
    packs = "\n".join(c_message_pack(c, name) + "\n" + c_message_unpack(c, name) for c in MESSAGES)
    unpack_cases, pack_cases = [], []
    for c in p.MESSAGE_TYPES:
        stem = c_struct_name(c)
        unpack_cases.append(f"    case 0x{int(c.KIND):02X}u: return {name}_unpack_{stem}(in, len, &m->{stem});")
        pack_cases.append(f"    case 0x{int(c.KIND):02X}u: return {name}_pack_{stem}(&m->{stem}, out);")
    reply_kinds = [p.reply_kind(c.KIND) for c in COMMANDS]
    reply_cases = "\n".join(f"    case 0x{k:02X}u:" for k in reply_kinds)
    commands = []
    for c in COMMANDS:
        if c in (p.Heartbeat, p.UploadBegin, p.UploadChunk, p.UploadCommit):
            continue
        stem = c_struct_name(c)
        commands.append(f"    case 0x{int(c.KIND):02X}u:\n"
                        f"        reply.result = link->h->{stem}(link->h->ctx, &req.{stem}, &reply);\n"
                        f"        break;")
    command_cases = "\n".join(commands)
    framing, receiver = c_framing_source(name), c_receiver_source(name)
    return f"""{banner}
#include <string.h>
#include "{name}.h"

{framing}

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

{receiver}

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
