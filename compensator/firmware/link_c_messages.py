"""C99 text of the link's messages on the board side: one struct, ``pack`` and ``unpack`` per message.

Read from the same layout table as the Python codec (:mod:`compensator.link.protocol`),
so each message's bytes are the same at both ends; part of the generated link
code (:func:`compensator.firmware.link_c.render_link_c`).
"""

from __future__ import annotations

from compensator.link import protocol as p

__all__ = ["C_TYPES", "C_SIZES", "MESSAGES", "COMMANDS", "c_struct_name", "c_message_struct", "c_message_pack",
           "c_message_unpack"]

#: Wire types -> C types, and their sizes in bytes.
C_TYPES = {"u8": "uint8_t", "u16": "uint16_t", "u32": "uint32_t", "u64": "uint64_t", "i32": "int32_t"}
C_SIZES = {"u8": 1, "u16": 2, "u32": 4, "u64": 8, "i32": 4}

def c_struct_name(message_class) -> str:
    """Snake-case stem of a message class for C (``SetBias`` -> ``set_bias``).

    Parameters
    ----------
    message_class : type
        A message class of :mod:`compensator.link.protocol`.
    """
    return p.message_name(message_class)


#: Every message class, the generic Reply included.
MESSAGES = (*p.MESSAGE_TYPES, p.Reply)
#: Requests answered by a Reply (commands), and the requests answered by reports.
COMMANDS = [c for c in p.REQUEST_TYPES if p.message_type(p.reply_kind(c.KIND)) is p.Reply]


def c_message_struct(cls, name: str) -> str:
    """The C struct of a message class (``typedef struct {...} NAME_stem;``)."""
    lines = []
    for field, t in cls.LAYOUT:
        if t in C_TYPES:
            lines.append(f"    {C_TYPES[t]} {field};")
        elif t == "hash":
            lines.append(f"    uint8_t {field}[32];")
        elif t == "text":
            lines.append(f"    uint8_t {field}_len;\n    char {field}[{p.MAX_TEXT_BYTES}];")
        elif t == "data":
            lines.append(f"    uint8_t {field}_len;\n    uint8_t {field}[{p.MAX_CHUNK_BYTES}];")
        else:
            base = t.split("[")[0]
            lines.append(f"    {C_TYPES[base]} {field}[{p.FAULT_SLOTS}];")
    if not lines:
        lines.append("    uint8_t unused_;  /* no payload */")
    return f"typedef struct {{\n" + "\n".join(lines) + f"\n}} {name}_{c_struct_name(cls)};\n"


def c_message_pack(cls, name: str) -> str:
    """``NAME_pack_stem``: a message struct to its payload bytes; returns the length."""
    stem = c_struct_name(cls)
    body = []
    for field, t in cls.LAYOUT:
        if t in C_TYPES:
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


def c_message_unpack(cls, name: str) -> str:
    """``NAME_unpack_stem``: payload bytes to a message struct; 0, or -1 for a malformed payload."""
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
        if t in C_TYPES:
            if not fixed:
                body.append(f"    if (len - n < {C_SIZES[t]}u) return -1;")
            body.append(f"    m->{field} = get_{t}(in + n);\n    n += {C_SIZES[t]}u;")
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
                        f"        n += {C_SIZES[base]}u;\n    }}")
    if any(t == "text" for _, t in cls.LAYOUT) and not any("[" in t for _, t in cls.LAYOUT):
        body.insert(1, "    int i;")
    body.append("    return n == len ? 0 : -1;")
    return head + "\n".join(body) + "\n}\n"
