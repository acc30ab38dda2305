/*
 * A board in memory for the host tests: the board interface of trellis.h over plain
 * variables, plus a few functions the Rust side calls to set inputs and read outputs.
 * One instance (the core has one session per board); the Rust wrapper serialises tests.
 */
#include <string.h>

#include "trellis.h"

static struct trellis session;
static struct trellis_identity identity;
static char name[TRELLIS_NAME_MAX + 1];

static uint32_t now_us;
static int32_t count;
static uint8_t inputs;
static bool fault;
static bool enabled;
static int16_t duty;
static uint16_t tick_hz;
static uint8_t tx[4096];
static size_t tx_len;
static uint32_t tx_dropped;

void board_motor_drive(int16_t d) { enabled = true; duty = d; }
void board_motor_off(void) { enabled = false; duty = 0; }
bool board_driver_fault(void) { return fault; }
void board_sample(uint32_t *t, int32_t *c, uint8_t *in)
{
    *t = now_us;
    *c = count;
    *in = inputs;
    inputs &= (uint8_t)~TRELLIS_INPUT_INDEX; /* the index latch clears on sampling */
}
uint32_t board_time_us(void) { return now_us; }
void board_tick_rate(uint16_t hz) { tick_hz = hz; }
void board_uart_write(const uint8_t *bytes, uint8_t n)
{
    if (tx_len + n > sizeof tx) {
        tx_dropped++;
        return;
    }
    memcpy(tx + tx_len, bytes, n);
    tx_len += n;
}

void fake_power_up(uint16_t max_tick_hz, uint16_t features, const char *board_name)
{
    now_us = 0;
    count = 0;
    inputs = 0;
    fault = false;
    enabled = true; /* so the test sees that power-up switches it off */
    duty = 1;
    tick_hz = 0xffffu;
    tx_len = 0;
    tx_dropped = 0;
    strncpy(name, board_name, TRELLIS_NAME_MAX + 1);
    name[TRELLIS_NAME_MAX] = '\0';
    identity.max_tick_hz = max_tick_hz;
    identity.features = features;
    identity.name = name;
    trellis_init(&session, &identity);
}

void fake_set_time(uint32_t us) { now_us = us; }
void fake_set_count(int32_t c) { count = c; }
void fake_set_inputs(uint8_t in) { inputs = in; }
void fake_set_fault(bool f) { fault = f; }
void fake_rx(const uint8_t *bytes, size_t n)
{
    for (size_t i = 0; i < n; i++) {
        trellis_rx(&session, bytes[i]);
    }
}
void fake_tick(void) { trellis_tick(&session); }

size_t fake_take_tx(uint8_t *out, size_t cap)
{
    size_t n = tx_len < cap ? tx_len : cap;
    memcpy(out, tx, n);
    memmove(tx, tx + n, tx_len - n);
    tx_len -= n;
    return n;
}

bool fake_motor_enabled(void) { return enabled; }
int16_t fake_motor_duty(void) { return duty; }
uint16_t fake_tick_hz(void) { return tick_hz; }
uint16_t fake_bad_frames(void) { return session.bad_frames; }

size_t fake_hello_payload(uint8_t *out) { return trellis_hello_payload(&identity, out); }
size_t fake_telemetry_payload(uint16_t seq, uint32_t time_us, int32_t c, uint8_t in,
                              uint8_t status, uint16_t ack_seq, uint8_t *out)
{
    struct trellis_telemetry t = {seq, time_us, c, in, status, ack_seq};
    return trellis_telemetry_payload(&t, out);
}
