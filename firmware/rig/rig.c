/*
 * trellis-rig: the real trellis firmware image on simavr's ATmega328P, with a DC motor,
 * a belt axis and a quadrature encoder modelled at the chip's pins, and USART0 bridged to
 * a pseudo-terminal that servotty opens like any serial port.
 *
 *   trellis-rig FIRMWARE.elf [START_MM] [--spin EDGES_PER_S]
 *
 * --spin replaces the motor by encoder edges at a fixed rate (counting up), to measure the
 * highest edge rate the firmware decodes without losing counts.
 *
 * stdout, one line each, flushed at once (tests read it):
 *   pty PATH                                  the serial port to give servotty
 *   drive on|off t_us=T last_rx_us=R          the bridge enable changed (emulated time T;
 *                                             R = when the last byte from the host arrived)
 *   stats sim_s=S wall_s=W behind_ms=B busy_pct=P fw_cpu_pct=F pos_mm=X count=C enc_edges=E
 *                                             once a second: emulated and wall time, how
 *                                             far emulation lags real time, the share of
 *                                             real time the emulator spent computing, the
 *                                             share of the chip's cycles the firmware spent
 *                                             awake (not in sleep) over the last second
 *
 * Emulated time is held to wall time: the rig sleeps whenever the emulated chip is ahead
 * (simavr alone would run as fast as the host computer allows), so the firmware's ticks
 * arrive at the host in real time. busy_pct below 100 means real time holds with room.
 *
 * The motor model is deliberately plain (no inductance; the PWM is averaged, 25 kHz is far
 * above the electrical and mechanical corners): a permanent-magnet DC motor, i = (V - Ke w)/R,
 * J dw/dt = Kt i - b w - Coulomb friction, through a gearbox to a belt pulley, with hard
 * stops at both ends of the travel. The numbers describe a small 12 V gearmotor on a belt
 * axis; they are demo values, not a particular product.
 */
#define _GNU_SOURCE
#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <termios.h>
#include <time.h>
#include <unistd.h>

#include "avr_ioport.h"
#include "avr_uart.h"
#include "sim_avr.h"
#include "sim_elf.h"

#define F_CPU 16000000u

/* ---- The axis (demo values) ---- */
#define SUPPLY_V 12.0
#define R_OHM 2.0
#define KT 0.02            /* N m / A, = Ke in V s / rad */
#define J_KGM2 2.0e-6      /* rotor plus load reflected to the motor shaft */
#define B_NMS 1.0e-6       /* viscous friction */
#define COULOMB_NM 0.0005  /* dry friction, motor side */
#define GEAR 10.0          /* motor turns per pulley turn */
#define PULLEY_MM 12.0     /* belt travel per pulley turn */
#define COUNTS_PER_MOTOR_REV 48.0 /* 12 lines, 4x */
#define TRAVEL_MM 250.0
#define HOME_MM 3.0        /* home switch active below this */
#define LIMIT_MM 1.0       /* limit switches this close to either end */
#define COUNTS_PER_MM (COUNTS_PER_MOTOR_REV * GEAR / PULLEY_MM) /* 40 */

#define STEP_US 20u      /* plant step; also the shortest encoder edge spacing */
#define PUMP_US 50u      /* PTY polling period */

/* ATmega328P data-space addresses of the registers the rig reads (datasheet register
 * summary): port outputs and Timer1's PWM registers. */
#define REG_PORTB 0x25
#define REG_PORTD 0x2b
#define REG_TCCR1A 0x80
#define REG_ICR1L 0x86
#define REG_ICR1H 0x87
#define REG_OCR1AL 0x88
#define REG_OCR1AH 0x89

static avr_t *avr;
static volatile sig_atomic_t stop;

static struct {
    double pos_mm;
    double w;          /* motor speed, rad/s */
    long count;        /* encoder count shown at the pins */
    unsigned long edges;
    int drive_on;
} axis;

static int pty_master = -1;
static int pty_slave = -1;
static int uart_xoff;
static uint8_t in_buf[256];
static size_t in_len, in_pos;
static uint8_t out_buf[1 << 16];
static size_t out_len;
static uint64_t last_rx_us;

static avr_cycle_count_t asleep_cycles, asleep_mark, cycle_mark;
static double spin_rate;

static struct timespec wall0;
static double slept_s;
static double next_stats_s = 1.0;

static double wall_s(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)(t.tv_sec - wall0.tv_sec) + 1e-9 * (double)(t.tv_nsec - wall0.tv_nsec);
}

static uint64_t sim_us(void)
{
    return avr->cycle / (F_CPU / 1000000u);
}

/*
 * Drives one input pin from outside. The level is also declared as the port's "external"
 * state: simavr re-applies an input's internal pull-up whenever the firmware writes that
 * port's PORT register (the firmware does on every Duty), which would otherwise glitch the
 * encoder lines to 1 for a moment. A push-pull encoder output overrides the pull-up, and
 * this says so.
 */
static void pin(char port, int bit, int level)
{
    static uint8_t mask[2], value[2];
    int k = port == 'C' ? 0 : 1;
    uint8_t m = (uint8_t)(1u << bit);
    uint8_t v = level ? m : 0;
    if ((mask[k] & m) && (value[k] & m) == v) {
        return;
    }
    mask[k] |= m;
    value[k] = (uint8_t)((value[k] & ~m) | v);
    avr_ioport_external_t ext = {.name = port, .mask = mask[k], .value = value[k]};
    avr_ioctl(avr, AVR_IOCTL_IOPORT_SET_EXTERNAL(port), &ext);
    avr_raise_irq(avr_io_getirq(avr, AVR_IOCTL_IOPORT_GETIRQ(port), bit), (uint32_t)level);
}

/* Gray sequence, A in bit 0: 00, 01, 11, 10 while counting up (A leads B). */
static const int quad_state[4] = {0, 1, 3, 2};

static void show_count(long c)
{
    int s = quad_state[(unsigned long)c & 3u];
    pin('D', 2, s & 1);
    pin('D', 3, (s >> 1) & 1);
}

static void show_inputs(void)
{
    double p = axis.pos_mm;
    /* Switches pull to ground when active; the fault input stays high (no fault). */
    pin('C', 0, !(p < HOME_MM));
    pin('C', 1, !(p < LIMIT_MM));
    pin('C', 2, !(p > TRAVEL_MM - LIMIT_MM));
    pin('C', 3, 1);
    /* Index once per pulley turn, 0.1 mm wide. */
    double in_turn = fmod(p, PULLEY_MM);
    pin('D', 4, in_turn < 0.1);
}

/* The bridge as the pins drive it: enable, direction, PWM duty (0...1). */
static double bridge_volts(int *enabled)
{
    uint8_t portb = avr->data[REG_PORTB];
    uint8_t portd = avr->data[REG_PORTD];
    *enabled = (portd >> 7) & 1;
    if (!*enabled) {
        return 0.0;
    }
    double duty;
    if (avr->data[REG_TCCR1A] & 0x80) { /* COM1A1: OC1A driven by the timer */
        unsigned top = avr->data[REG_ICR1L] | (unsigned)avr->data[REG_ICR1H] << 8;
        unsigned ocr = avr->data[REG_OCR1AL] | (unsigned)avr->data[REG_OCR1AH] << 8;
        duty = ocr >= top ? 1.0 : (double)(ocr + 1) / (double)(top + 1);
    } else {
        duty = (portb >> 1) & 1 ? 1.0 : 0.0;
    }
    double sign = (portb & 1) ? 1.0 : -1.0;
    return sign * duty * SUPPLY_V;
}

static void step_plant(double dt)
{
    int enabled;
    double v = bridge_volts(&enabled);
    if (enabled != axis.drive_on) {
        axis.drive_on = enabled;
        printf("drive %s t_us=%llu last_rx_us=%llu\n", enabled ? "on" : "off",
               (unsigned long long)sim_us(), (unsigned long long)last_rx_us);
        fflush(stdout);
    }
    /* A disabled bridge leaves the motor open: no current, it coasts. */
    double i = enabled ? (v - KT * axis.w) / R_OHM : 0.0;
    double drive = KT * i - B_NMS * axis.w;
    if (fabs(axis.w) < 1e-3 && fabs(drive) <= COULOMB_NM) {
        axis.w = 0.0; /* stuck: static friction holds */
    } else {
        double dir = fabs(axis.w) >= 1e-3 ? (axis.w > 0 ? 1.0 : -1.0) : (drive > 0 ? 1.0 : -1.0);
        double w_new = axis.w + (drive - dir * COULOMB_NM) / J_KGM2 * dt;
        /* Friction stops the motor; it does not reverse it within a step. */
        axis.w = (axis.w != 0.0 && w_new * axis.w < 0.0) ? 0.0 : w_new;
    }
    axis.pos_mm += axis.w / (2.0 * M_PI) / GEAR * PULLEY_MM * dt;
    if (axis.pos_mm < 0.0) {
        axis.pos_mm = 0.0;
        axis.w = axis.w < 0.0 ? 0.0 : axis.w;
    } else if (axis.pos_mm > TRAVEL_MM) {
        axis.pos_mm = TRAVEL_MM;
        axis.w = axis.w > 0.0 ? 0.0 : axis.w;
    }
    /* At most one encoder edge per step, so edges are at least STEP_US apart. */
    long target = (long)floor(axis.pos_mm * COUNTS_PER_MM);
    if (target != axis.count) {
        axis.count += target > axis.count ? 1 : -1;
        axis.edges++;
        show_count(axis.count);
    }
    show_inputs();
}

static void print_stats(void)
{
    double sim = (double)avr->cycle / F_CPU;
    double wall = wall_s();
    double busy = wall > 0 ? 100.0 * (1.0 - slept_s / wall) : 100.0;
    avr_cycle_count_t span = avr->cycle - cycle_mark;
    double fw_cpu = span > 0 ? 100.0 * (1.0 - (double)(asleep_cycles - asleep_mark) / (double)span)
                             : 0.0;
    cycle_mark = avr->cycle;
    asleep_mark = asleep_cycles;
    printf("stats sim_s=%.3f wall_s=%.3f behind_ms=%.1f busy_pct=%.1f fw_cpu_pct=%.2f "
           "pos_mm=%.3f count=%ld enc_edges=%lu\n",
           sim, wall, (wall - sim) * 1000.0, busy, fw_cpu, axis.pos_mm, axis.count, axis.edges);
    fflush(stdout);
}

static void throttle(void)
{
    double sim = (double)avr->cycle / F_CPU;
    double wall = wall_s();
    if (sim > wall + 0.0005) {
        struct timespec d;
        double ahead = sim - wall;
        d.tv_sec = (time_t)ahead;
        d.tv_nsec = (long)((ahead - (double)d.tv_sec) * 1e9);
        nanosleep(&d, NULL);
        slept_s += ahead;
    }
    if (wall >= next_stats_s) {
        next_stats_s += 1.0;
        print_stats();
    }
}

static avr_cycle_count_t on_step(avr_t *a, avr_cycle_count_t when, void *param)
{
    (void)a;
    (void)param;
    static unsigned n;
    if (spin_rate <= 0.0) {
        step_plant(STEP_US * 1e-6);
    }
    if (++n % (1000u / STEP_US) == 0) {
        throttle();
    }
    return when + STEP_US * (F_CPU / 1000000u);
}

/* --spin: one forward edge per call, at a fixed rate. */
static avr_cycle_count_t on_spin(avr_t *a, avr_cycle_count_t when, void *param)
{
    (void)a;
    (void)param;
    static double due;
    axis.count++;
    axis.edges++;
    show_count(axis.count);
    due += (double)F_CPU / spin_rate;
    avr_cycle_count_t step = (avr_cycle_count_t)due;
    due -= (double)step;
    return when + (step > 0 ? step : 1);
}

/* ---- UART <-> PTY ---- */

static void on_uart_out(struct avr_irq_t *irq, uint32_t value, void *param)
{
    (void)irq;
    (void)param;
    if (out_len < sizeof out_buf) {
        out_buf[out_len++] = (uint8_t)value;
    }
}

static void feed_uart(void)
{
    avr_irq_t *in = avr_io_getirq(avr, AVR_IOCTL_UART_GETIRQ('0'), UART_IRQ_INPUT);
    while (!uart_xoff && in_pos < in_len) {
        last_rx_us = sim_us();
        avr_raise_irq(in, in_buf[in_pos++]);
    }
}

static void on_xon(struct avr_irq_t *irq, uint32_t value, void *param)
{
    (void)irq;
    (void)value;
    (void)param;
    uart_xoff = 0;
    feed_uart();
}

static void on_xoff(struct avr_irq_t *irq, uint32_t value, void *param)
{
    (void)irq;
    (void)value;
    (void)param;
    uart_xoff = 1;
}

static avr_cycle_count_t on_pump(avr_t *a, avr_cycle_count_t when, void *param)
{
    (void)a;
    (void)param;
    if (out_len > 0) {
        ssize_t n = write(pty_master, out_buf, out_len);
        /* No reader, or its buffer full: a real UART's bytes would be lost too. */
        size_t done = n > 0 ? (size_t)n : out_len;
        memmove(out_buf, out_buf + done, out_len - done);
        out_len -= done;
    }
    if (in_pos >= in_len) {
        ssize_t n = read(pty_master, in_buf, sizeof in_buf);
        in_pos = 0;
        in_len = n > 0 ? (size_t)n : 0;
    }
    feed_uart();
    return when + PUMP_US * (F_CPU / 1000000u);
}

static int open_pty(char *path, size_t cap)
{
    pty_master = posix_openpt(O_RDWR | O_NOCTTY);
    if (pty_master < 0 || grantpt(pty_master) != 0 || unlockpt(pty_master) != 0) {
        return -1;
    }
    const char *name = ptsname(pty_master);
    if (name == NULL) {
        return -1;
    }
    snprintf(path, cap, "%s", name);
    /* Held open so the master never sees a hang-up between host sessions. */
    pty_slave = open(name, O_RDWR | O_NOCTTY);
    struct termios t;
    if (pty_slave < 0 || tcgetattr(pty_slave, &t) != 0) {
        return -1;
    }
    cfmakeraw(&t);
    tcsetattr(pty_slave, TCSANOW, &t);
    fcntl(pty_master, F_SETFL, fcntl(pty_master, F_GETFL) | O_NONBLOCK);
    return 0;
}

/* The emulator's own sleep would wait in wall time for every idle period; the rig paces
 * emulated time itself (throttle), so idle periods are skipped at once. */
static void no_sleep(avr_t *a, avr_cycle_count_t how_long)
{
    (void)a;
    asleep_cycles += how_long + 1; /* simavr then advances the clock by how_long + 1 */
}

static void on_signal(int sig)
{
    (void)sig;
    stop = 1;
}

int main(int argc, char **argv)
{
    if (argc < 2) {
        fprintf(stderr, "usage: trellis-rig FIRMWARE.elf [START_MM] [--spin EDGES_PER_S]\n");
        return 2;
    }
    axis.pos_mm = 60.0;
    for (int k = 2; k < argc; k++) {
        if (strcmp(argv[k], "--spin") == 0 && k + 1 < argc) {
            spin_rate = atof(argv[++k]);
            if (!(spin_rate > 0.0 && spin_rate <= 1e6)) {
                fprintf(stderr, "trellis-rig: --spin wants 0 < EDGES_PER_S <= 1000000\n");
                return 2;
            }
        } else {
            axis.pos_mm = atof(argv[k]);
        }
    }
    if (!(axis.pos_mm >= 0.0 && axis.pos_mm <= TRAVEL_MM)) {
        fprintf(stderr, "trellis-rig: START_MM must be within 0...%.0f\n", TRAVEL_MM);
        return 2;
    }
    elf_firmware_t fw;
    memset(&fw, 0, sizeof fw);
    if (elf_read_firmware(argv[1], &fw) != 0) {
        fprintf(stderr, "trellis-rig: cannot read %s\n", argv[1]);
        return 1;
    }
    avr = avr_make_mcu_by_name("atmega328p");
    if (avr == NULL) {
        fprintf(stderr, "trellis-rig: simavr has no atmega328p\n");
        return 1;
    }
    avr_init(avr);
    avr->log = LOG_ERROR;
    fw.frequency = F_CPU;
    avr_load_firmware(avr, &fw);
    avr->frequency = F_CPU;
    avr->sleep = no_sleep;

    uint32_t flags = 0;
    avr_ioctl(avr, AVR_IOCTL_UART_GET_FLAGS('0'), &flags);
    flags &= ~(uint32_t)(AVR_UART_FLAG_STDIO | AVR_UART_FLAG_POLL_SLEEP);
    avr_ioctl(avr, AVR_IOCTL_UART_SET_FLAGS('0'), &flags);
    avr_irq_register_notify(avr_io_getirq(avr, AVR_IOCTL_UART_GETIRQ('0'), UART_IRQ_OUTPUT),
                            on_uart_out, NULL);
    avr_irq_register_notify(avr_io_getirq(avr, AVR_IOCTL_UART_GETIRQ('0'), UART_IRQ_OUT_XON),
                            on_xon, NULL);
    avr_irq_register_notify(avr_io_getirq(avr, AVR_IOCTL_UART_GETIRQ('0'), UART_IRQ_OUT_XOFF),
                            on_xoff, NULL);

    char path[128];
    if (open_pty(path, sizeof path) != 0) {
        fprintf(stderr, "trellis-rig: cannot open a pseudo-terminal: %s\n", strerror(errno));
        return 1;
    }
    signal(SIGTERM, on_signal);
    signal(SIGINT, on_signal);
    signal(SIGPIPE, SIG_IGN);

    axis.count = (long)floor(axis.pos_mm * COUNTS_PER_MM);
    show_count(axis.count);
    show_inputs();
    avr_cycle_timer_register_usec(avr, STEP_US, on_step, NULL);
    avr_cycle_timer_register_usec(avr, PUMP_US, on_pump, NULL);
    if (spin_rate > 0.0) {
        avr_cycle_timer_register_usec(avr, 1000, on_spin, NULL);
    }

    printf("pty %s\n", path);
    fflush(stdout);
    clock_gettime(CLOCK_MONOTONIC, &wall0);
    int state = cpu_Running;
    while (!stop && state != cpu_Done && state != cpu_Crashed) {
        state = avr_run(avr);
    }
    print_stats();
    if (state == cpu_Crashed) {
        fprintf(stderr, "trellis-rig: the emulated chip crashed\n");
        return 1;
    }
    return 0;
}
