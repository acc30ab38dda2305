/*
 * trellis: board firmware for servotty's wire protocol v1 (docs/protocol.md).
 *
 * This header is the whole portable core: portable C99, no hardware access, no dynamic
 * memory. It owns the wire (CRC-16, COBS, the message layouts), the session (Hello,
 * Configure, Duty, Stop), the tick (sample, watchdog, telemetry) and the status bits.
 *
 * A port (firmware/avr/ for the ATmega328P) supplies the board interface declared at the
 * end of this file and calls three functions: trellis_init() once at power-up,
 * trellis_rx() for every byte received, trellis_tick() once per tick. All three must be
 * called from one context (the main loop); the core is not re-entrant. docs/firmware.md
 * gives the timing contract of each board function.
 */
#ifndef TRELLIS_H
#define TRELLIS_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

/* ---- Wire constants (docs/protocol.md sections 3-6) ---- */

#define TRELLIS_PROTOCOL_VERSION 1u

#define TRELLIS_KIND_HOST_HELLO 0x01u
#define TRELLIS_KIND_CONFIGURE 0x02u
#define TRELLIS_KIND_DUTY 0x03u
#define TRELLIS_KIND_STOP 0x04u
#define TRELLIS_KIND_BOARD_HELLO 0x81u
#define TRELLIS_KIND_TELEMETRY 0x82u

#define TRELLIS_STATUS_MOTOR_ON 0x01u
#define TRELLIS_STATUS_WATCHDOG_TRIPPED 0x02u
#define TRELLIS_STATUS_DRIVER_FAULT 0x04u

#define TRELLIS_INPUT_HOME 0x01u
#define TRELLIS_INPUT_LIMIT_LOW 0x02u
#define TRELLIS_INPUT_LIMIT_HIGH 0x04u
#define TRELLIS_INPUT_INDEX 0x08u

#define TRELLIS_FEATURE_INDEX_PULSE 0x0001u
#define TRELLIS_FEATURE_HOME_INPUT 0x0002u
#define TRELLIS_FEATURE_LIMIT_INPUTS 0x0004u

/* Duty on the wire: +-10000 = +-100.00 %. */
#define TRELLIS_DUTY_FULL_SCALE 10000

/* Longest board name carried in the board Hello, bytes. */
#define TRELLIS_NAME_MAX 16u

/* Payload sizes (version + kind + body) of the fixed messages. */
#define TRELLIS_TELEMETRY_PAYLOAD 16u
#define TRELLIS_HELLO_MAX_PAYLOAD (8u + TRELLIS_NAME_MAX)

/*
 * Encoded bytes the receiver keeps between delimiters. Host frames are at most 10 bytes on
 * the wire (Configure, Duty); a longer run is not a v1 host frame and is dropped whole.
 */
#define TRELLIS_RX_MAX 32u

/* Longest frame the core writes (board Hello with a 16-byte name): 28 bytes. */
#define TRELLIS_TX_MAX 32u

/* ---- Wire functions, usable on their own (the host tests drive them directly) ---- */

/* CRC-16/IBM-3740: width 16, poly 0x1021, init 0xFFFF, no reflection, xorout 0. */
uint16_t trellis_crc16(const uint8_t *bytes, size_t len);

/*
 * COBS-encodes len bytes of src into dst (no delimiter). dst must hold
 * len + len / 254 + 1 bytes. Returns the encoded length.
 */
size_t trellis_cobs_encode(const uint8_t *src, size_t len, uint8_t *dst);

/*
 * Decodes len COBS bytes (without the delimiter) into dst, which holds cap bytes.
 * Returns the decoded length, or -1 if the input is not valid COBS (a zero byte, a code
 * pointing past the end) or does not fit. src and dst may be the same buffer.
 */
long trellis_cobs_decode(const uint8_t *src, size_t len, uint8_t *dst, size_t cap);

/*
 * Writes the complete wire frame for a payload: COBS(payload || CRC little-endian) || 0x00.
 * len must be at most 64; out must hold len + 4 bytes. Returns the frame length.
 */
size_t trellis_frame(const uint8_t *payload, size_t len, uint8_t *out);

/*
 * Checks one received frame (the bytes between two delimiters): COBS decoding, length of
 * at least 4, CRC. On success writes the payload (version, kind, body; CRC removed) to
 * payload (cap bytes) and returns its length; returns -1 if any check fails.
 */
long trellis_unframe(const uint8_t *encoded, size_t len, uint8_t *payload, size_t cap);

/* What the board announces in its Hello. */
struct trellis_identity {
    uint16_t max_tick_hz; /* the fastest tick the port can run, Hz */
    uint16_t features;    /* TRELLIS_FEATURE_* bits */
    const char *name;     /* for the operator; cut at TRELLIS_NAME_MAX bytes */
};

/* One tick's telemetry fields (docs/protocol.md section 6.6). */
struct trellis_telemetry {
    uint16_t seq;
    uint32_t board_time_us;
    int32_t count;
    uint8_t inputs;
    uint8_t status;
    uint16_t ack_seq;
};

/* Payload writers; return the payload length. */
size_t trellis_hello_payload(const struct trellis_identity *id, uint8_t *out);
size_t trellis_telemetry_payload(const struct trellis_telemetry *t, uint8_t *out);

/* ---- The session ---- */

struct trellis {
    const struct trellis_identity *id;
    bool streaming;       /* a valid Configure arrived since power-up or the last Hello */
    bool motor_on;        /* the bridge applies the last Duty */
    bool tripped;         /* WATCHDOG_TRIPPED */
    uint16_t seq;         /* seq of the next telemetry frame */
    uint16_t ack_seq;     /* seq of the last valid Duty or Stop */
    uint16_t watchdog_ms; /* from Configure */
    uint32_t last_cmd_us; /* board time of the last valid Duty or Stop (or Configure) */
    uint8_t rx[TRELLIS_RX_MAX];
    uint8_t rx_len;
    bool rx_overflow;
    /* Diagnostics, not on the wire: frames dropped by the checks, valid commands taken. */
    uint16_t bad_frames;
    uint16_t commands;
};

/* Power-up: motor off, not streaming; sends a lone 0x00 to flush the host's receiver. */
void trellis_init(struct trellis *t, const struct trellis_identity *id);

/* One received byte. Acts on a frame when its delimiter arrives. */
void trellis_rx(struct trellis *t, uint8_t byte);

/*
 * One tick: takes the port's sample, runs the watchdog, sends Telemetry. Does nothing
 * while not streaming. The port calls it once per period set by board_tick_rate().
 */
void trellis_tick(struct trellis *t);

/* ---- The board interface: every port implements these ---- */

/* Enable the bridge and apply duty (already clamped to +-10000) before returning. */
void board_motor_drive(int16_t duty);
/* Disable the bridge (motor coasts, no drive) before returning. */
void board_motor_off(void);
/* True while the driver stage reports a fault; false if the board has no fault input. */
bool board_driver_fault(void);
/*
 * The sample of the current tick, taken at the tick instant (ideally latched in the timer
 * interrupt): board time in us, the 4x quadrature count, and the input bits. The INDEX bit
 * means "index seen since the previous sample"; the port clears its latch here.
 */
void board_sample(uint32_t *time_us, int32_t *count, uint8_t *inputs);
/* Free-running microsecond clock, wrapping at 2^32. */
uint32_t board_time_us(void);
/* Start calling trellis_tick() at hz (1 ... max_tick_hz); the first tick within 1/hz s. */
void board_tick_rate(uint16_t hz);
/* Queue n bytes for the UART without blocking; drop all of them if they do not fit. */
void board_uart_write(const uint8_t *bytes, uint8_t n);

#ifdef __cplusplus
}
#endif

#endif /* TRELLIS_H */
