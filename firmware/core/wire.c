/*
 * The wire: CRC-16, COBS, frames and the two board -> host payloads.
 * Everything here is pure (no board functions), so the host tests check it byte for byte
 * against servotty's own protocol code.
 */
#include "trellis.h"

/*
 * CRC-16/IBM-3740 a byte at a time without a table: the register's high byte meets the
 * data byte, and the polynomial 0x1021 = x^16 + x^12 + x^5 + 1 turns into three shifted
 * copies of that byte (after folding its high nibble into its low one). A common form of
 * this CRC (common practice, no source); the host tests check it against servotty's table
 * CRC on random data. No table means no RAM on chips that keep constants there, and on an
 * 8-bit core it is several times faster than a nibble table indexed by 12-bit shifts.
 */
uint16_t trellis_crc16(const uint8_t *bytes, size_t len)
{
    uint16_t crc = 0xffffu;
    for (size_t i = 0; i < len; i++) {
        uint8_t x = (uint8_t)((crc >> 8) ^ bytes[i]);
        x = (uint8_t)(x ^ (x >> 4));
        crc = (uint16_t)((crc << 8) ^ ((uint16_t)x << 12) ^ ((uint16_t)x << 5) ^ x);
    }
    return crc;
}

size_t trellis_cobs_encode(const uint8_t *src, size_t len, uint8_t *dst)
{
    size_t code_at = 0; /* where the current block's code byte goes */
    size_t out = 1;
    uint8_t code = 1;
    for (size_t i = 0; i < len; i++) {
        if (src[i] == 0) {
            dst[code_at] = code;
            code_at = out++;
            code = 1;
            continue;
        }
        dst[out++] = src[i];
        code++;
        if (code == 0xffu) {
            /* A full block of 254 data bytes stands for no zero. At the very end of the
             * input no empty block follows it (the form servotty's encoder writes). */
            dst[code_at] = code;
            if (i + 1 == len) {
                return out;
            }
            code_at = out++;
            code = 1;
        }
    }
    dst[code_at] = code;
    return out;
}

long trellis_cobs_decode(const uint8_t *src, size_t len, uint8_t *dst, size_t cap)
{
    size_t in = 0;
    size_t out = 0;
    while (in < len) {
        uint8_t code = src[in++];
        if (code == 0) {
            return -1;
        }
        for (uint8_t k = 1; k < code; k++) {
            if (in >= len || src[in] == 0 || out >= cap) {
                return -1;
            }
            dst[out++] = src[in++];
        }
        /* A block shorter than 254 data bytes stands for a zero, except at the end. */
        if (code != 0xffu && in < len) {
            if (out >= cap) {
                return -1;
            }
            dst[out++] = 0;
        }
    }
    return (long)out;
}

size_t trellis_frame(const uint8_t *payload, size_t len, uint8_t *out)
{
    uint8_t raw[64 + 2];
    if (len > 64) {
        return 0;
    }
    for (size_t i = 0; i < len; i++) {
        raw[i] = payload[i];
    }
    uint16_t crc = trellis_crc16(payload, len);
    raw[len] = (uint8_t)(crc & 0xffu);
    raw[len + 1] = (uint8_t)(crc >> 8);
    size_t n = trellis_cobs_encode(raw, len + 2, out);
    out[n] = 0;
    return n + 1;
}

long trellis_unframe(const uint8_t *encoded, size_t len, uint8_t *payload, size_t cap)
{
    /* Decode into a scratch buffer first so a bad frame leaves payload untouched. */
    uint8_t raw[TRELLIS_RX_MAX];
    long n = trellis_cobs_decode(encoded, len, raw, sizeof raw);
    if (n < 4) {
        return -1; /* bad COBS, or too short for version, kind and CRC */
    }
    size_t plen = (size_t)n - 2;
    uint16_t crc = (uint16_t)(raw[plen] | ((uint16_t)raw[plen + 1] << 8));
    if (crc != trellis_crc16(raw, plen) || plen > cap) {
        return -1;
    }
    for (size_t i = 0; i < plen; i++) {
        payload[i] = raw[i];
    }
    return (long)plen;
}

static uint8_t *put16(uint8_t *p, uint16_t v)
{
    p[0] = (uint8_t)(v & 0xffu);
    p[1] = (uint8_t)(v >> 8);
    return p + 2;
}

static uint8_t *put32(uint8_t *p, uint32_t v)
{
    p = put16(p, (uint16_t)(v & 0xffffu));
    return put16(p, (uint16_t)(v >> 16));
}

size_t trellis_hello_payload(const struct trellis_identity *id, uint8_t *out)
{
    uint8_t *p = out;
    *p++ = TRELLIS_PROTOCOL_VERSION;
    *p++ = TRELLIS_KIND_BOARD_HELLO;
    *p++ = TRELLIS_PROTOCOL_VERSION; /* the newest version this firmware implements */
    p = put16(p, id->max_tick_hz);
    p = put16(p, id->features);
    uint8_t n = 0;
    while (id->name != NULL && n < TRELLIS_NAME_MAX && id->name[n] != '\0') {
        n++;
    }
    *p++ = n;
    for (uint8_t i = 0; i < n; i++) {
        *p++ = (uint8_t)id->name[i];
    }
    return (size_t)(p - out);
}

size_t trellis_telemetry_payload(const struct trellis_telemetry *t, uint8_t *out)
{
    uint8_t *p = out;
    *p++ = TRELLIS_PROTOCOL_VERSION;
    *p++ = TRELLIS_KIND_TELEMETRY;
    p = put16(p, t->seq);
    p = put32(p, t->board_time_us);
    p = put32(p, (uint32_t)t->count);
    *p++ = t->inputs;
    *p++ = t->status;
    p = put16(p, t->ack_seq);
    return (size_t)(p - out);
}
