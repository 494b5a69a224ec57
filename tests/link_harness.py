"""A small C program built from the generated board side of the link, for the tests.

Modes (first argument):

``rx``
    Feed stdin to the receiver byte by byte; print one line per event:
    ``F version kind seq payload-hex`` or ``E code``.
``echo``
    For each valid frame: unpack by kind, pack again, frame with the same
    kind and sequence number; print ``O frame-hex``, or ``U status`` when
    unpacking failed.
``crc``
    Print CRC-16 and CRC-32 of stdin in hex.
``board``
    A stub board on stdin/stdout (raw bytes): a bias that refuses more than
    36 V, outputs, faults, uploads, and a telemetry stream at the period the
    host sets. The number of *executed* set-bias commands is reported in the
    status report's ``sensor_adc_code`` so a test can see that a retried
    command was answered but not executed twice.
"""

from __future__ import annotations

from pathlib import Path

from cbuild import build

HARNESS = r"""
#define _POSIX_C_SOURCE 200809L
#include <stdio.h>
#include <string.h>
#include <stdint.h>
#include <unistd.h>
#include <sys/select.h>
#include <sys/time.h>
#include "board_link.h"

static uint8_t input[1 << 22];

static size_t read_all(void)
{
    size_t n = 0;
    ssize_t k;
    while ((k = read(0, input + n, sizeof input - n)) > 0) n += (size_t)k;
    return n;
}

static void hex(const uint8_t *p, size_t n)
{
    size_t i;
    for (i = 0; i < n; ++i) printf("%02x", p[i]);
}

/* ---------------------------------------------------------------- stub board */
typedef struct {
    int32_t bias_uv;
    int32_t overvoltage_uv;
    uint8_t mode;
    uint8_t enabled;
    uint32_t period_ms;
    uint32_t latched;
    uint32_t executed_set_bias;
    uint32_t image_crc[3];
    uint64_t now_ms;
} stub;

static void w(void *ctx, const uint8_t *bytes, size_t n)
{
    (void)ctx;
    while (n) {
        ssize_t k = write(1, bytes, n);
        if (k <= 0) return;
        bytes += k;
        n -= (size_t)k;
    }
}

static void seen(void *ctx) { (void)ctx; }

static void ident(void *ctx, board_link_identity_report *o)
{
    stub *s = (stub *)ctx;
    o->protocol_version = BOARD_LINK_PROTOCOL_VERSION;
    memcpy(o->firmware_version, "c-stub-1", 8); o->firmware_version_len = 8;
    memcpy(o->board_name, "stub-board", 10); o->board_name_len = 10;
    o->serial_number_len = 0;
    memcpy(o->table_sha256, &s->image_crc[1], 4);
    memcpy(o->coefficients_sha256, &s->image_crc[2], 4);
}

static void sample(stub *s, board_link_telemetry_report *t)
{
    t->uptime_ms = s->now_ms;
    t->sensor_adc_code = s->executed_set_bias;
    t->sensor_temp_mdegc = 21500;
    t->bias_set_uv = s->enabled ? s->bias_uv : 0;
    t->bias_measured_uv = BOARD_LINK_ABSENT_I32;
    t->sipm_current_na = 1234;
    t->cooler_current_ma = BOARD_LINK_ABSENT_I32;
    t->hot_side_temp_mdegc = BOARD_LINK_ABSENT_I32;
    t->overvoltage_target_uv = s->overvoltage_uv;
    t->faults_live = 0;
    t->faults_latched = s->latched;
    t->dark_peak_gain = BOARD_LINK_ABSENT_U32;
    t->dark_peak_gain_err = BOARD_LINK_ABSENT_U32;
}

static void status(void *ctx, board_link_status_report *o)
{
    stub *s = (stub *)ctx;
    board_link_telemetry_report t;
    sample(s, &t);
    memcpy(o, &t, sizeof t);  /* the status report starts with the telemetry fields */
    o->mode = s->mode;
    o->outputs_enabled = s->enabled;
    o->bias_dac_code = 0;
    o->telemetry_period_ms = s->period_ms;
}

static void faults(void *ctx, board_link_fault_report *o)
{
    stub *s = (stub *)ctx;
    o->faults_live = 0;
    o->faults_latched = s->latched;
}

static uint8_t set_ov(void *ctx, const board_link_set_overvoltage *q, board_link_reply *r)
{
    stub *s = (stub *)ctx;
    if (q->overvoltage_uv > 7000000 || q->overvoltage_uv < 1000000) {
        r->value = q->overvoltage_uv > 7000000 ? 7000000 : 1000000;
        r->faults = 1u << 8;
        s->latched |= 1u << 8;
        return BOARD_LINK_RESULT_REFUSED_LIMIT;
    }
    s->overvoltage_uv = q->overvoltage_uv;
    s->mode = BOARD_LINK_MODE_LAW;
    r->value = q->overvoltage_uv;
    return BOARD_LINK_RESULT_OK;
}

static uint8_t set_bias(void *ctx, const board_link_set_bias *q, board_link_reply *r)
{
    stub *s = (stub *)ctx;
    if (q->bias_uv > 36000000) {
        r->value = 36000000;
        r->faults = 1u << 8;
        s->latched |= 1u << 8;
        return BOARD_LINK_RESULT_REFUSED_LIMIT;
    }
    s->executed_set_bias++;
    s->bias_uv = q->bias_uv;
    s->mode = BOARD_LINK_MODE_FIXED;
    r->value = q->bias_uv;
    return BOARD_LINK_RESULT_OK;
}

static uint8_t set_outputs(void *ctx, const board_link_set_outputs *q, board_link_reply *r)
{
    stub *s = (stub *)ctx;
    s->enabled = q->enabled ? 1u : 0u;
    r->value = s->enabled;
    return BOARD_LINK_RESULT_OK;
}

static uint8_t clear(void *ctx, const board_link_clear_faults *q, board_link_reply *r)
{
    stub *s = (stub *)ctx;
    s->latched &= ~q->mask;
    r->value = (int32_t)s->latched;
    return BOARD_LINK_RESULT_OK;
}

static uint8_t period(void *ctx, const board_link_set_telemetry_period *q, board_link_reply *r)
{
    stub *s = (stub *)ctx;
    s->period_ms = q->period_ms;
    r->value = (int32_t)q->period_ms;
    return BOARD_LINK_RESULT_OK;
}

static uint8_t apply(void *ctx, uint8_t target, const uint8_t *image, uint32_t size, board_link_reply *r)
{
    stub *s = (stub *)ctx;
    if (size >= 4 && memcmp(image, "BAD!", 4) == 0) return BOARD_LINK_RESULT_INVALID_IMAGE;
    s->image_crc[target] = board_link_crc32(image, size);
    r->value = (int32_t)size;
    return BOARD_LINK_RESULT_OK;
}

static uint64_t now_ms(void)
{
    struct timeval tv;
    gettimeofday(&tv, NULL);
    return (uint64_t)tv.tv_sec * 1000u + (uint64_t)tv.tv_usec / 1000u;
}

static int run_board(void)
{
    static board_link_link link;
    static stub s;
    board_link_handlers h;
    uint64_t start = now_ms(), next = 0;
    memset(&h, 0, sizeof h);
    h.ctx = &s; h.write = w; h.host_seen = seen; h.identify = ident; h.read_status = status;
    h.read_faults = faults; h.set_overvoltage = set_ov; h.set_bias = set_bias; h.set_outputs = set_outputs;
    h.clear_faults = clear; h.set_telemetry_period = period; h.apply_image = apply;
    board_link_init(&link, &h);
    for (;;) {
        fd_set fds;
        struct timeval tv;
        uint8_t buf[512];
        ssize_t k;
        FD_ZERO(&fds);
        FD_SET(0, &fds);
        tv.tv_sec = 0;
        tv.tv_usec = 5000;
        s.now_ms = now_ms() - start;
        if (select(1, &fds, NULL, NULL, &tv) > 0) {
            k = read(0, buf, sizeof buf);
            if (k <= 0) return 0;
            board_link_receive(&link, buf, (size_t)k);
        }
        s.now_ms = now_ms() - start;
        if (s.period_ms && s.now_ms >= next) {
            board_link_telemetry_report t;
            sample(&s, &t);
            board_link_send_telemetry(&link, &t);
            next = s.now_ms + s.period_ms;
        }
    }
}

int main(int argc, char **argv)
{
    size_t n, i;
    if (argc < 2) return 2;
    if (strcmp(argv[1], "board") == 0) return run_board();
    n = read_all();
    if (strcmp(argv[1], "crc") == 0) {
        printf("%04x %08lx\n", board_link_crc16(input, n), (unsigned long)board_link_crc32(input, n));
        return 0;
    }
    {
        static board_link_rx rx;
        board_link_rx_init(&rx);
        for (i = 0; i < n; ++i) {
            int e = board_link_rx_byte(&rx, input[i]);
            if (e == BOARD_LINK_RX_NONE) continue;
            if (strcmp(argv[1], "rx") == 0) {
                if (e == BOARD_LINK_RX_FRAME) {
                    printf("F %u %u %u ", rx.version, rx.kind, rx.seq);
                    hex(rx.payload, rx.payload_len);
                    printf("\n");
                } else {
                    printf("E %d\n", e);
                }
            } else if (e == BOARD_LINK_RX_FRAME) {
                board_link_message m;
                uint8_t payload[BOARD_LINK_MAX_PAYLOAD_BYTES], out[BOARD_LINK_MAX_ENCODED_BYTES];
                int st = board_link_unpack(rx.kind, rx.payload, rx.payload_len, &m);
                if (st != 0) {
                    printf("U %d\n", st);
                } else {
                    size_t len = board_link_pack(rx.kind, &m, payload);
                    size_t k = board_link_frame(rx.kind, rx.seq, payload, len, out);
                    printf("O ");
                    hex(out, k);
                    printf("\n");
                }
            }
        }
    }
    return 0;
}
"""


def build_link_harness(tmp_path: Path, flags) -> Path:
    """Render the board side of the link, compile it with the harness, return the executable."""
    from compensator.firmware.link_c import render_link_c

    return build(tmp_path, {**render_link_c(), "main.c": HARNESS}, flags, output="link_harness")
