/*
 * trellis on the ATmega328P at 16 MHz: the board interface of ../core/trellis.h over the
 * chip's timers, pins and USART0, and the main loop that feeds the core.
 *
 * Register settings are written from the ATmega48A/PA/88A/PA/168A/PA/328/P datasheet
 * (Atmel-8271, rev. E 07/2012 and H 08/2014; chapter numbers differ in other revisions):
 *   - USART0: chapter 20, "20.3.1 Internal Clock Generation", Table 20-1 (UBRR equations),
 *     "20.3.2 Double Speed Operation (U2Xn)", "20.10 Examples of Baud Rate Setting": at
 *     fosc = 16.0000 MHz, 500 kbit/s is U2X0 = 1, UBRR0 = 3, error 0.0 %.
 *   - Timer/Counter1 PWM: chapter 16, Table 16-4 "Waveform Generation Mode Bit Description",
 *     mode 14 (fast PWM, TOP = ICR1), compare output mode COM1A1:0 = 2 (non-inverting).
 *   - Timer/Counter2 tick and clock: chapter 18, CTC mode (WGM22:0 = 2, TOP = OCR2A), clock
 *     select CS22:0 = 3 (clk/32) (table from memory).
 *   - Pin change interrupts: chapter 13 "External Interrupts", PCICR/PCMSK2 (PCINT18-20).
 *   - Sleep: chapter 9 "Power Management and Sleep Modes", Idle mode (timers, USART and pin
 *     changes keep running and wake the CPU).
 *   - Watchdog: "System Control and Reset", watchdog system reset mode (avr-libc wdt.h).
 *
 * Pins (Arduino-Uno-style header names in brackets):
 *   PD0 RXD [D0], PD1 TXD [D1]        UART to the host (USB bridge)
 *   PD2 [D2], PD3 [D3]                encoder A, B (PCINT18, PCINT19)
 *   PD4 [D4]                          encoder index (PCINT20), active high
 *   PB1 [D9]                          PWM to the bridge (OC1A), 25 kHz
 *   PB0 [D8]                          DIR: high = forward (positive duty)
 *   PB2 [D10]                         DIR inverted, for bridges with two direction inputs
 *   PD7 [D7]                          bridge enable, high = on (pull-down on the board!)
 *   PC0 [A0], PC1 [A1], PC2 [A2]      home, low limit, high limit; to ground = active
 *   PC3 [A3]                          driver fault, low = fault (pulled up: no fault)
 */
#include <avr/interrupt.h>
#include <avr/io.h>
#include <avr/sleep.h>
#include <avr/wdt.h>
#include <util/atomic.h>

#include "trellis.h"

#ifndef F_CPU
#error "F_CPU must be set (16000000UL)"
#endif

/* 16 MHz / (8 * (3 + 1)) = 500 000 bit/s exactly (datasheet Table 20-1, U2X0 = 1). */
#define UART_UBRR 3u

/* Timer1 fast PWM period: 640 clocks = 25 kHz, above hearing; 640 duty steps (0.16 %). */
#define PWM_PERIOD 640u

/* Timer2 compare period: clk/32 = 500 kHz (2 us a count), 125 counts = 250 us. */
#define BASE_COUNTS 125u
#define BASE_US 250u
#define US_PER_COUNT 2u

/*
 * 500 kbit/s carries 2 500 telemetry frames/s flat out; at 1 kHz the board -> host load is
 * 40 % and telemetry + duty take 600 us of each 1 ms tick (docs/protocol.md section 12).
 */
#define MAX_TICK_HZ 1000u

static const struct trellis_identity identity = {
    .max_tick_hz = MAX_TICK_HZ,
    .features = TRELLIS_FEATURE_INDEX_PULSE | TRELLIS_FEATURE_HOME_INPUT
                | TRELLIS_FEATURE_LIMIT_INPUTS,
    .name = "trellis-328p",
};

static struct trellis session;

/* ---- Clock and tick (Timer2) ---- */

static volatile uint32_t base_us;    /* advanced 250 us by every compare match */
static volatile uint16_t tick_every; /* compare matches per tick; 0 = not ticking */
static volatile uint16_t tick_left;
static volatile uint8_t tick_pending;
static volatile uint16_t ticks_missed; /* ticks the main loop did not take in time */

/* The sample latched at the tick instant. */
static volatile uint32_t sample_us;
static volatile int32_t sample_count;
static volatile uint8_t sample_inputs;

/* ---- Encoder (pin change interrupt) ---- */

static volatile int32_t enc_count;
static volatile uint8_t enc_prev;        /* last A/B state: bit 0 = A, bit 1 = B */
static volatile uint8_t index_seen;
static volatile uint16_t enc_errors;     /* both channels changed at once: counts lost */

/*
 * 4x quadrature decoding by transition table, indexed by (previous AB << 2) | new AB with
 * A in bit 0. Forward is A leading B: 00 -> 01 -> 11 -> 10 -> 00 (as AB = A | B << 1:
 * 0 -> 1 -> 3 -> 2 -> 0). A jump across two states (both channels changed) is ambiguous:
 * it counts nothing and is recorded in enc_errors.
 */
static const int8_t quad_step[16] = {
    0, +1, -1, 0,  /* from 0 */
    -1, 0, 0, +1,  /* from 1 */
    +1, 0, 0, -1,  /* from 2 */
    0, -1, +1, 0,  /* from 3 */
};

ISR(PCINT2_vect)
{
    uint8_t pins = PIND;
    uint8_t ab = (uint8_t)((pins >> PD2) & 0x03u);
    uint8_t idx = (uint8_t)((enc_prev << 2) | ab);
    enc_prev = ab;
    enc_count += quad_step[idx];
    if (idx == 3u || idx == 6u || idx == 9u || idx == 12u) {
        enc_errors++;
    }
    if (pins & _BV(PD4)) {
        index_seen = 1;
    }
}

static uint8_t read_inputs(void)
{
    uint8_t pins = PINC;
    uint8_t in = 0;
    if (!(pins & _BV(PC0))) {
        in |= TRELLIS_INPUT_HOME;
    }
    if (!(pins & _BV(PC1))) {
        in |= TRELLIS_INPUT_LIMIT_LOW;
    }
    if (!(pins & _BV(PC2))) {
        in |= TRELLIS_INPUT_LIMIT_HIGH;
    }
    return in;
}

ISR(TIMER2_COMPA_vect)
{
    uint32_t now = base_us + BASE_US;
    base_us = now;
    if (tick_every != 0 && --tick_left == 0) {
        tick_left = tick_every;
        if (tick_pending) {
            ticks_missed++;
        }
        /* One instant for time, count and inputs: taken here, not when the main loop
         * gets to the tick, so the host's dt and velocity carry no loop jitter. Encoder
         * interrupts cannot run inside this handler, so the count is consistent. */
        sample_us = now;
        sample_count = enc_count;
        sample_inputs = (uint8_t)(read_inputs() | (index_seen ? TRELLIS_INPUT_INDEX : 0u));
        index_seen = 0;
        tick_pending = 1;
    }
}

uint32_t board_time_us(void)
{
    uint32_t us;
    uint8_t counts;
    ATOMIC_BLOCK(ATOMIC_RESTORESTATE)
    {
        us = base_us;
        counts = TCNT2;
        /* A compare match not yet serviced: the counter has restarted from 0. */
        if ((TIFR2 & _BV(OCF2A)) && counts < BASE_COUNTS - 1u) {
            us += BASE_US;
        }
    }
    return us + (uint32_t)counts * US_PER_COUNT;
}

void board_sample(uint32_t *time_us, int32_t *count, uint8_t *inputs)
{
    ATOMIC_BLOCK(ATOMIC_RESTORESTATE)
    {
        *time_us = sample_us;
        *count = sample_count;
        *inputs = sample_inputs;
    }
}

void board_tick_rate(uint16_t hz)
{
    /* The tick is a whole number of 250 us periods: 1000 Hz and 500 Hz are exact, other
     * rates are the nearest 4000/n Hz (the host takes dt from board time, not from hz). */
    uint16_t n = 0;
    if (hz != 0) {
        n = (uint16_t)((4000u + hz / 2u) / hz);
        if (n == 0) {
            n = 1;
        }
    }
    ATOMIC_BLOCK(ATOMIC_RESTORESTATE)
    {
        tick_every = n;
        tick_left = n;
        tick_pending = 0;
    }
}

/* ---- Motor (Timer1 PWM, DIR, enable) ---- */

static void pwm_disconnect(void)
{
    TCCR1A &= (uint8_t)~(_BV(COM1A1) | _BV(COM1A0));
    PORTB &= (uint8_t)~_BV(PB1);
}

void board_motor_off(void)
{
    PORTD &= (uint8_t)~_BV(PD7); /* bridge disabled first */
    pwm_disconnect();
}

void board_motor_drive(int16_t duty)
{
    uint16_t mag = (uint16_t)(duty < 0 ? -duty : duty);
    uint16_t on = (uint16_t)(((uint32_t)mag * PWM_PERIOD + TRELLIS_DUTY_FULL_SCALE / 2)
                             / TRELLIS_DUTY_FULL_SCALE);
    if (duty < 0) {
        PORTB = (uint8_t)((PORTB & ~_BV(PB0)) | _BV(PB2));
    } else {
        PORTB = (uint8_t)((PORTB | _BV(PB0)) & ~_BV(PB2));
    }
    if (on == 0) {
        pwm_disconnect();
    } else {
        /* Fast PWM, non-inverting: the output is high for OCR1A + 1 clocks of 640. */
        OCR1A = on - 1u;
        TCCR1A |= _BV(COM1A1);
    }
    PORTD |= _BV(PD7);
}

bool board_driver_fault(void)
{
    return !(PINC & _BV(PC3));
}

/* ---- UART (USART0, interrupt driven, ring buffers) ---- */

#define RING 64u /* a power of two; holds two board Hellos or three telemetry frames */

static uint8_t rx_ring[RING];
static volatile uint8_t rx_head, rx_tail;
static volatile uint16_t rx_overruns; /* bytes lost: the frame they belonged to fails CRC */
static uint8_t tx_ring[RING];
static volatile uint8_t tx_head, tx_tail;
static volatile uint16_t tx_dropped; /* frames dropped because the ring was full */

ISR(USART_RX_vect)
{
    uint8_t status = UCSR0A;
    uint8_t byte = UDR0;
    uint8_t next = (uint8_t)((rx_head + 1u) & (RING - 1u));
    if ((status & (_BV(DOR0) | _BV(FE0))) || next == rx_tail) {
        rx_overruns++;
        /* A lost byte must not glue two frames together silently: queueing a delimiter
         * would hide the loss, so the byte is dropped and the CRC catches the frame. */
        if (next == rx_tail) {
            return;
        }
    }
    rx_ring[rx_head] = byte;
    rx_head = next;
}

ISR(USART_UDRE_vect)
{
    if (tx_tail == tx_head) {
        UCSR0B &= (uint8_t)~_BV(UDRIE0);
        return;
    }
    UDR0 = tx_ring[tx_tail];
    tx_tail = (uint8_t)((tx_tail + 1u) & (RING - 1u));
}

void board_uart_write(const uint8_t *bytes, uint8_t n)
{
    uint8_t used = (uint8_t)(tx_head - tx_tail) % RING;
    if (n > RING - 1u - used) {
        tx_dropped++;
        return;
    }
    uint8_t head = tx_head;
    for (uint8_t i = 0; i < n; i++) {
        tx_ring[head] = bytes[i];
        head = (uint8_t)((head + 1u) & (RING - 1u));
    }
    tx_head = head;
    UCSR0B |= _BV(UDRIE0);
}

static bool rx_pop(uint8_t *byte)
{
    if (rx_tail == rx_head) {
        return false;
    }
    *byte = rx_ring[rx_tail];
    rx_tail = (uint8_t)((rx_tail + 1u) & (RING - 1u));
    return true;
}

/* ---- Power-up and the main loop ---- */

static void hardware_init(void)
{
    /* Bridge off before anything else: enable low, PWM low, DIR low. */
    PORTD &= (uint8_t)~_BV(PD7);
    DDRD |= _BV(PD7);
    PORTB &= (uint8_t)~(_BV(PB0) | _BV(PB1) | _BV(PB2));
    DDRB |= _BV(PB0) | _BV(PB1) | _BV(PB2);

    /* Switch and fault inputs with pull-ups; encoder inputs with pull-ups too (open
     * collector encoders need them; push-pull ones do not mind). */
    DDRC &= (uint8_t)~(_BV(PC0) | _BV(PC1) | _BV(PC2) | _BV(PC3));
    PORTC |= _BV(PC0) | _BV(PC1) | _BV(PC2) | _BV(PC3);
    DDRD &= (uint8_t)~(_BV(PD2) | _BV(PD3) | _BV(PD4));
    PORTD |= _BV(PD2) | _BV(PD3);

    /* Timer1: fast PWM, TOP = ICR1 (mode 14), no prescaling; output connected on drive. */
    ICR1 = PWM_PERIOD - 1u;
    OCR1A = 0;
    TCCR1A = _BV(WGM11);
    TCCR1B = _BV(WGM13) | _BV(WGM12) | _BV(CS10);

    /* Timer2: CTC, TOP = OCR2A, clk/32: a compare match every 250 us. */
    TCCR2A = _BV(WGM21);
    OCR2A = BASE_COUNTS - 1u;
    TIMSK2 = _BV(OCIE2A);
    TCCR2B = _BV(CS21) | _BV(CS20);

    /* Encoder: pin change interrupts on PD2, PD3, PD4. */
    enc_prev = (uint8_t)((PIND >> PD2) & 0x03u);
    PCMSK2 = _BV(PCINT18) | _BV(PCINT19) | _BV(PCINT20);
    PCICR = _BV(PCIE2);

    /* USART0: 500 kbit/s, 8N1, receive interrupt on; transmit interrupt when queued. */
    UBRR0 = UART_UBRR;
    UCSR0A = _BV(U2X0);
    UCSR0C = _BV(UCSZ01) | _BV(UCSZ00);
    UCSR0B = _BV(RXEN0) | _BV(TXEN0) | _BV(RXCIE0);
}

int main(void)
{
    /* After a watchdog reset the watchdog stays on: switch it off before the slow part. */
    MCUSR = 0;
    wdt_disable();
    hardware_init();
    trellis_init(&session, &identity);
    /* A hung main loop resets the chip, and power-up means motor off. This is a guard
     * against firmware faults, not a safety function. */
    wdt_enable(WDTO_60MS);
    set_sleep_mode(SLEEP_MODE_IDLE);
    sei();
    for (;;) {
        wdt_reset();
        uint8_t byte;
        while (rx_pop(&byte)) {
            trellis_rx(&session, byte);
        }
        if (tick_pending) {
            tick_pending = 0;
            trellis_tick(&session);
        }
        /* Sleep until the next interrupt unless one already left work: interrupts are
         * enabled by the instruction before SLEEP, so none can slip in between. */
        cli();
        if (rx_tail == rx_head && !tick_pending) {
            sleep_enable();
            sei();
            sleep_cpu();
            sleep_disable();
        }
        sei();
    }
}
