/*
 * The session: what the board does with each valid host message, the tick, and the
 * watchdog (docs/protocol.md sections 7-9). The only decision the board takes on its own
 * is the watchdog's: motor off when the host stops answering.
 */
#include "trellis.h"

static uint16_t get16(const uint8_t *p)
{
    return (uint16_t)(p[0] | ((uint16_t)p[1] << 8));
}

static void motor_off(struct trellis *t)
{
    board_motor_off();
    t->motor_on = false;
}

static void send(const uint8_t *payload, size_t len)
{
    uint8_t frame[TRELLIS_TX_MAX];
    size_t n = trellis_frame(payload, len, frame);
    board_uart_write(frame, (uint8_t)n);
}

void trellis_init(struct trellis *t, const struct trellis_identity *id)
{
    t->id = id;
    t->streaming = false;
    t->tripped = false;
    t->seq = 0;
    t->ack_seq = 0;
    t->watchdog_ms = 0;
    t->last_cmd_us = 0;
    t->rx_len = 0;
    t->rx_overflow = false;
    t->bad_frames = 0;
    t->commands = 0;
    motor_off(t);
    board_tick_rate(0);
    /* A lone delimiter flushes whatever partial frame the host's receiver holds. */
    static const uint8_t flush = 0;
    board_uart_write(&flush, 1);
}

/* A frame that passed COBS and CRC: version, kind and exact body length, then act. */
static void dispatch(struct trellis *t, const uint8_t *p, size_t len)
{
    if (p[0] != TRELLIS_PROTOCOL_VERSION) {
        t->bad_frames++;
        return;
    }
    uint8_t kind = p[1];
    const uint8_t *body = p + 2;
    size_t body_len = len - 2;
    if (kind == TRELLIS_KIND_HOST_HELLO && body_len == 0) {
        motor_off(t); /* Hello switches the motor off before anything else */
        t->streaming = false;
        board_tick_rate(0);
        uint8_t hello[TRELLIS_HELLO_MAX_PAYLOAD];
        send(hello, trellis_hello_payload(t->id, hello));
    } else if (kind == TRELLIS_KIND_CONFIGURE && body_len == 4) {
        uint16_t hz = get16(body);
        uint16_t wd = get16(body + 2);
        if (hz == 0 || hz > t->id->max_tick_hz || wd == 0) {
            return; /* ignored: the board stays as it was */
        }
        motor_off(t);
        t->tripped = false;
        t->seq = 0;
        t->ack_seq = 0;
        t->watchdog_ms = wd;
        t->last_cmd_us = board_time_us();
        board_tick_rate(hz);
        t->streaming = true;
    } else if (kind == TRELLIS_KIND_DUTY && body_len == 4) {
        if (!t->streaming) {
            return; /* no watchdog armed yet */
        }
        t->ack_seq = get16(body);
        t->last_cmd_us = board_time_us();
        t->tripped = false;
        if (board_driver_fault()) {
            motor_off(t);
            return;
        }
        int32_t duty = (int16_t)get16(body + 2);
        if (duty > TRELLIS_DUTY_FULL_SCALE) {
            duty = TRELLIS_DUTY_FULL_SCALE;
        } else if (duty < -TRELLIS_DUTY_FULL_SCALE) {
            duty = -TRELLIS_DUTY_FULL_SCALE;
        }
        board_motor_drive((int16_t)duty);
        t->motor_on = true;
    } else if (kind == TRELLIS_KIND_STOP && body_len == 2) {
        motor_off(t);
        t->ack_seq = get16(body);
        t->last_cmd_us = board_time_us();
    } else {
        /* Unknown kind, a board -> host kind (echo), or a wrong body length. */
        t->bad_frames++;
        return;
    }
    t->commands++;
}

void trellis_rx(struct trellis *t, uint8_t byte)
{
    if (byte != 0) {
        if (t->rx_len < TRELLIS_RX_MAX) {
            t->rx[t->rx_len++] = byte;
        } else {
            t->rx_overflow = true;
        }
        return;
    }
    uint8_t len = t->rx_len;
    bool overflow = t->rx_overflow;
    t->rx_len = 0;
    t->rx_overflow = false;
    if (len == 0) {
        return; /* an empty frame: a flush, not an error */
    }
    uint8_t payload[TRELLIS_RX_MAX];
    long n = overflow ? -1 : trellis_unframe(t->rx, len, payload, sizeof payload);
    if (n < 2) {
        t->bad_frames++;
        return;
    }
    dispatch(t, payload, (size_t)n);
}

void trellis_tick(struct trellis *t)
{
    if (!t->streaming) {
        return;
    }
    struct trellis_telemetry tm;
    board_sample(&tm.board_time_us, &tm.count, &tm.inputs);
    uint32_t idle_us = board_time_us() - t->last_cmd_us; /* exact across the wrap */
    if (idle_us >= (uint32_t)t->watchdog_ms * 1000u) {
        motor_off(t);
        t->tripped = true;
    }
    bool fault = board_driver_fault();
    if (fault) {
        motor_off(t);
    }
    tm.seq = t->seq;
    tm.ack_seq = t->ack_seq;
    tm.status = (uint8_t)((t->motor_on ? TRELLIS_STATUS_MOTOR_ON : 0u)
                          | (t->tripped ? TRELLIS_STATUS_WATCHDOG_TRIPPED : 0u)
                          | (fault ? TRELLIS_STATUS_DRIVER_FAULT : 0u));
    uint8_t payload[TRELLIS_TELEMETRY_PAYLOAD];
    send(payload, trellis_telemetry_payload(&tm, payload));
    t->seq++;
}
