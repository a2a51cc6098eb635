/*
 * mcu_skeleton.c -- the shape of a board port: a small reaction-wheel balance rig on a
 * generic microcontroller, with rb_board doing the protocol, the loops and the safety logic.
 *
 * The "hardware layer" below is made up: a handful of extern functions with plain names
 * (uart_write_nonblocking, timer_micros, imu_read, flash_write_slot, ...). Replace each with
 * your chip's driver calls. Everything else is meant to be kept as it is or adapted.
 *
 * The rig is the one of rigbench's simulated `balance` board (speed drive): an inner `tilt`
 * loop turning tilt (deg) into a wheel-speed command (rev/s), and an outer `trim` loop turning
 * wheel speed (rev/s) into the tilt set-point (deg), so the wheel does not run away.
 *
 * Compile check (no link): gcc -std=c99 -Wall -Wextra -Wpedantic -Werror -c
 *                         examples/mcu_skeleton.c -Iinclude
 *
 * A software kill is not an emergency stop: this rig also needs a hardware cut-off that
 * removes motor power independently of this code (PORTING.md, "Safety").
 */
#include <math.h>
#include <stddef.h>
#include <stdint.h>
#include <string.h>

#include "rb_board.h"

/* ------------------------------------------------------------ made-up hardware layer */

extern void hw_init(void);                      /* clocks, pins */
extern int hw_reset_was_power_on(void);         /* 1 after power-up, 0 after a reset */
extern void irq_disable(void);                  /* mask interrupts (short sections only) */
extern void irq_enable(void);
extern void cpu_sleep_until_interrupt(void);

extern void uart_init(uint32_t baud);           /* 8N1 */
extern void uart_rx_irq_enable(void);           /* from here on uart_rx_isr() runs */
extern int uart_rx_ready(void);
extern uint8_t uart_rx_byte(void);
/* Copy up to n bytes into the UART's transmit FIFO / DMA ring; never waits. */
extern size_t uart_write_nonblocking(const uint8_t *data, size_t n);

extern uint32_t timer_micros(void);             /* free-running, wraps at 2^32 */
extern void loop_timer_start(uint32_t period_us);  /* calls loop_timer_isr() every period */

/* IMU: accelerometer in g along the body's x (tilt direction) and z (up), gyro in deg/s
 * about the tilt axis. */
extern void imu_read(float *accel_x_g, float *accel_z_g, float *gyro_deg_s);
extern int32_t encoder_count(void);             /* wheel encoder, counts, free-running */
#define ENCODER_COUNTS_PER_REV 2048.0f

/* The wheel motor's driver runs its own speed loop and takes a speed in rev/s. */
extern void motor_speed_set(float rev_s);
extern void motor_driver_enable(int on);        /* the driver's enable pin */

/* Two flash slots of at least 512 + 16 bytes each, erased to 0xFF. */
extern int flash_erase_slot(int slot);          /* 0 on success */
extern int flash_write_slot(int slot, uint32_t offset, const uint8_t *data, size_t n);
extern void flash_read_slot(int slot, uint32_t offset, uint8_t *out, size_t n);

extern void led_set(int on);

/* ------------------------------------------------------------ the rig's variables */

#define LOOP_RATE_HZ 500u

/* Parameters: the initial values are the boot defaults (rb_init loads saved ones over them).
 * rb_board reads and writes these between loop periods only. */
static rb_real tilt_kp = 0.64, tilt_ki = 9.9, tilt_kd = 0.0, tilt_dfilt_s = 0.005;
static rb_real trim_kp = 0.2, trim_ki = 0.05, trim_kd = 0.0, trim_dfilt_s = 0.05;
static rb_real wheel_sp = 0.0, cmd_limit = 50.0, sp_limit = 5.0, tilt_tc_s = 0.5;
static rb_real trip_tilt = 20.0, trip_wheel = 45.0, arm_tilt = 3.0, arm_wheel = 1.0;
static rb_real torque_limit = 0.3;

/* Signals: tilt, rate and wheel are measured (read_sensors below); cmd and sp are the loops'
 * outputs and relay the relay state, all three written by rb_board. */
static rb_real sig_tilt, sig_rate, sig_wheel, sig_cmd, sig_sp, sig_relay;

/* Every string of the declaration is an RB_TEXT constant and every table RB_FLASH: on
 * cores that would otherwise copy constants into RAM (8-bit AVR) they stay in flash, and
 * elsewhere these are ordinary constants (rb_board.h). Names the loops refer to are the
 * same constants. */
RB_TEXT(t_tilt, "tilt");          RB_TEXT(t_rate, "rate");        RB_TEXT(t_wheel, "wheel");
RB_TEXT(t_cmd, "cmd");            RB_TEXT(t_sp, "sp");            RB_TEXT(t_relay, "relay");
RB_TEXT(t_trim, "trim");
RB_TEXT(t_tilt_kp, "tilt_kp");    RB_TEXT(t_tilt_ki, "tilt_ki");  RB_TEXT(t_tilt_kd, "tilt_kd");
RB_TEXT(t_tilt_dfilt_s, "tilt_dfilt_s");
RB_TEXT(t_trim_kp, "trim_kp");    RB_TEXT(t_trim_ki, "trim_ki");  RB_TEXT(t_trim_kd, "trim_kd");
RB_TEXT(t_trim_dfilt_s, "trim_dfilt_s");
RB_TEXT(t_wheel_sp, "wheel_sp");  RB_TEXT(t_cmd_limit, "cmd_limit");
RB_TEXT(t_sp_limit, "sp_limit");  RB_TEXT(t_tilt_tc_s, "tilt_tc_s");
RB_TEXT(t_trip_tilt, "trip_tilt"); RB_TEXT(t_trip_wheel, "trip_wheel");
RB_TEXT(t_arm_tilt, "arm_tilt");  RB_TEXT(t_arm_wheel, "arm_wheel");
RB_TEXT(t_torque_limit, "torque_limit");
RB_TEXT(u_deg, "deg");            RB_TEXT(u_deg_s, "deg/s");      RB_TEXT(u_rev_s, "rev/s");
RB_TEXT(u_s, "s");                RB_TEXT(u_1, "1");              RB_TEXT(u_nm, "N.m");
RB_TEXT(u_kp_tilt, "rev/s/deg");  RB_TEXT(u_ki_tilt, "rev/s/deg/s");
RB_TEXT(u_kd_tilt, "rev/deg");    RB_TEXT(u_kp_trim, "deg.s/rev");
RB_TEXT(u_ki_trim, "deg/rev");    RB_TEXT(u_kd_trim, "deg.s2/rev");
RB_TEXT(t_board, "balance-board-1"); RB_TEXT(t_fw, "0.1.0"); RB_TEXT(t_balance, "balance");

static const rb_param params[] RB_FLASH = {
    /* name            unit         min    max   variable       writable */
    {t_tilt_kp,       u_kp_tilt,    0.0,  10.0, &tilt_kp,       1},
    {t_tilt_ki,       u_ki_tilt,    0.0, 100.0, &tilt_ki,       1},
    {t_tilt_kd,       u_kd_tilt,    0.0,   1.0, &tilt_kd,       1},
    {t_tilt_dfilt_s,  u_s,          0.0,   0.1, &tilt_dfilt_s,  1},
    {t_trim_kp,       u_kp_trim,    0.0,   5.0, &trim_kp,       1},
    {t_trim_ki,       u_ki_trim,    0.0,   5.0, &trim_ki,       1},
    {t_trim_kd,       u_kd_trim,    0.0,   1.0, &trim_kd,       1},
    {t_trim_dfilt_s,  u_s,          0.0,   1.0, &trim_dfilt_s,  1},
    {t_wheel_sp,      u_rev_s,    -20.0,  20.0, &wheel_sp,      1},
    {t_cmd_limit,     u_rev_s,      0.0,  50.0, &cmd_limit,     1},
    {t_sp_limit,      u_deg,        0.0,  10.0, &sp_limit,      1},
    {t_tilt_tc_s,     u_s,         0.05,   5.0, &tilt_tc_s,     1},  /* tilt filter */
    {t_trip_tilt,     u_deg,        1.0,  30.0, &trip_tilt,     1},  /* trips on |tilt| */
    {t_trip_wheel,    u_rev_s,      1.0,  60.0, &trip_wheel,    1},
    {t_arm_tilt,      u_deg,        0.1,  10.0, &arm_tilt,      1},  /* arm needs |tilt| <= */
    {t_arm_wheel,     u_rev_s,      0.1,  20.0, &arm_wheel,     1},
    {t_torque_limit,  u_nm,         0.3,   0.3, &torque_limit,  0},  /* a fact, read-only */
};

static const rb_signal signals[] RB_FLASH = {   /* telemetry order */
    {t_tilt, u_deg, &sig_tilt},
    {t_rate, u_deg_s, &sig_rate},
    {t_wheel, u_rev_s, &sig_wheel},
    {t_cmd, u_rev_s, &sig_cmd},
    {t_sp, u_deg, &sig_sp},
    {t_relay, u_1, &sig_relay},
};

static const rb_loop loops[] RB_FLASH = {
    /* Outer loop first: its output `sp` is the tilt loop's set-point. Reverse-acting:
     * e = wheel_sp - wheel. Integrating plant, relay test on the output. */
    {.name = t_trim, .measure = t_wheel, .output = t_sp,
     .kp = t_trim_kp, .ki = t_trim_ki, .kd = t_trim_kd,
     .plant = RB_PLANT_INTEGRATING, .relay = RB_RELAY_OUTPUT, .action = RB_ACTION_REVERSE,
     .setpoint = t_wheel_sp, .setpoint_signal = NULL,
     .limit = t_sp_limit, .dfilt = t_trim_dfilt_s, .rate = NULL},
    /* Inner loop: direct-acting (e = tilt - sp: the wheel must spin up the way the body
     * falls), open-loop unstable, so its relay test runs on the integral channel with the
     * loop closed. The gyro gives the derivative directly. */
    {.name = t_tilt, .measure = t_tilt, .output = t_cmd,
     .kp = t_tilt_kp, .ki = t_tilt_ki, .kd = t_tilt_kd,
     .plant = RB_PLANT_UNSTABLE, .relay = RB_RELAY_INTEGRAL, .action = RB_ACTION_DIRECT,
     .setpoint = t_sp, .setpoint_signal = t_sp,
     .limit = t_cmd_limit, .dfilt = t_tilt_dfilt_s, .rate = t_rate},
};

static const rb_rig rig RB_FLASH = {
    .board = t_board, .fw = t_fw, .rig = t_balance,
    .rate_hz = (rb_real)LOOP_RATE_HZ, .watchdog_ms = 500,
    .params = params, .n_params = (uint8_t)(sizeof params / sizeof params[0]),
    .signals = signals, .n_signals = (uint8_t)(sizeof signals / sizeof signals[0]),
    .loops = loops, .n_loops = (uint8_t)(sizeof loops / sizeof loops[0]),
    .command = t_cmd, .simulated = 0,
};

/* The board: several kilobytes, so static, never on the stack. */
static rb_board board;

/* ------------------------------------------------------------ the port */

/* Kill bytes counted by the receive interrupt, and how many of them rb_poll has acted on.
 * While they differ, no main-context set_output may switch the motor on, not even one the
 * interrupt cut into half-way: rb_rx_byte switches the motor off at once, but rb_board
 * latches the trip only in its next rb_poll. One byte each: read and written atomically. */
static volatile uint8_t kills_seen, kills_handled;

static size_t port_write(void *ctx, const uint8_t *data, size_t n)
{
    (void)ctx;
    return uart_write_nonblocking(data, n);
}

static uint32_t port_micros(void *ctx)
{
    (void)ctx;
    return timer_micros();
}

/* Fill the measured signals: tilt from a complementary filter of the accelerometer's tilt
 * and the gyro, gyro rate, wheel speed from the encoder's count difference. */
static void port_read_sensors(void *ctx)
{
    static int started;
    static int32_t last_count;
    const rb_real dt_s = (rb_real)1.0 / (rb_real)LOOP_RATE_HZ;
    float ax, az, gyro;
    int32_t count;
    rb_real accel_tilt_deg, a;

    (void)ctx;
    imu_read(&ax, &az, &gyro);
    count = encoder_count();
    /* float maths (atan2f): on a core without a double FPU, double would pull in the
     * software double routines for this one line */
    accel_tilt_deg = (rb_real)(atan2f(ax, az) * (180.0f / 3.14159265f));
    if (!started) {                  /* first sample: take the accelerometer as it is */
        sig_tilt = accel_tilt_deg;
        last_count = count;
        started = 1;
    } else {                         /* gyro above ~1/(2 pi tilt_tc_s) Hz, accelerometer below */
        a = tilt_tc_s / (tilt_tc_s + dt_s);
        sig_tilt = a * (sig_tilt + (rb_real)gyro * dt_s) + ((rb_real)1.0 - a) * accel_tilt_deg;
    }
    sig_rate = (rb_real)gyro;
    /* unsigned difference: right across the counter's wrap */
    sig_wheel = (rb_real)(int32_t)((uint32_t)count - (uint32_t)last_count)
                * (rb_real)(LOOP_RATE_HZ / ENCODER_COUNTS_PER_REV);
    last_count = count;
}

/* Called in every rb_step, with enabled == 0 whenever the motor leaves `running`, and from
 * the receive interrupt on a kill byte. Off means the driver disabled, not just a zero
 * speed. The driver calls must each be one register write (or otherwise safe when the
 * receive interrupt cuts in between them). */
static void port_set_output(void *ctx, rb_real command, int enabled)
{
    (void)ctx;
    if (!enabled) {
        motor_driver_enable(0);
        motor_speed_set(0.0f);
        return;
    }
    if (kills_seen != kills_handled) {
        motor_driver_enable(0);      /* a kill is on its way through rb_poll */
        return;
    }
    motor_speed_set((float)command);
    motor_driver_enable(1);
    if (kills_seen != kills_handled)  /* a kill came in between: undo at once */
        motor_driver_enable(0);
}

/* Parameters in two flash slots: each write goes to the slot not holding the newest image,
 * its header last, so a power cut leaves the old image or the new one, never half of one. */
#define NV_MAGIC 0x52424E56u         /* any constant of your own */
typedef struct {
    uint32_t magic, serial;          /* serial: which slot is newer */
    uint16_t length, crc;            /* crc: rb_crc16 of the image */
    uint32_t spare;
} nv_header;

static int nv_slot_read(int slot, nv_header *h)
{
    flash_read_slot(slot, 0, (uint8_t *)h, sizeof *h);
    return h->magic == NV_MAGIC && h->length <= RB_NV_MAX;
}

static int nv_newest(nv_header *h)   /* slot index, -1 when neither holds a valid image */
{
    nv_header h0, h1;
    int ok0 = nv_slot_read(0, &h0), ok1 = nv_slot_read(1, &h1);
    if (ok0 && ok1) {
        /* serial arithmetic: right across the 2^32 wrap */
        int first = (int32_t)(h1.serial - h0.serial) > 0;
        *h = first ? h1 : h0;
        return first;
    }
    if (ok0 || ok1) {
        *h = ok0 ? h0 : h1;
        return ok0 ? 0 : 1;
    }
    return -1;
}

static size_t port_nv_load(void *ctx, uint8_t *image, size_t cap)
{
    nv_header h;
    int slot = nv_newest(&h);
    (void)ctx;
    if (slot < 0 || h.length > cap)
        return 0;                    /* nothing saved yet: rb_board keeps the defaults */
    flash_read_slot(slot, sizeof h, image, h.length);
    /* a damaged image reads as none (a port may then try the other slot) */
    return rb_crc16(image, h.length) == h.crc ? h.length : 0;
}

static int port_nv_save(void *ctx, const uint8_t *image, size_t n)
{
    nv_header h, newest;
    int last = nv_newest(&newest);
    int slot = last == 0 ? 1 : 0;
    (void)ctx;
    if (n > RB_NV_MAX)
        return -1;
    memset(&h, 0xFF, sizeof h);
    h.magic = NV_MAGIC;
    h.serial = last < 0 ? 1u : newest.serial + 1u;
    h.length = (uint16_t)n;
    h.crc = rb_crc16(image, n);
    if (flash_erase_slot(slot) != 0)
        return -1;
    if (flash_write_slot(slot, sizeof h, image, n) != 0)
        return -1;
    return flash_write_slot(slot, 0, (const uint8_t *)&h, sizeof h) != 0 ? -1 : 0;
}


/* ------------------------------------------------------------ interrupts */

static volatile uint8_t step_due;
static volatile uint32_t late_steps;  /* periods the main loop was too slow for: watch it */

/* UART receive interrupt: hand every byte to rb_board. It only fills a ring, except the
 * kill byte, which switches the motor off here and now. */
void uart_rx_isr(void);
void uart_rx_isr(void)
{
    while (uart_rx_ready()) {
        uint8_t byte = uart_rx_byte();
        if (byte == RB_KILL_BYTE)
            kills_seen++;             /* before rb_rx_byte: see port_set_output */
        rb_rx_byte(&board, byte);
    }
}

/* Loop timer interrupt at LOOP_RATE_HZ: only a flag; rb_step runs in the main loop so it can
 * never run at the same time as rb_poll. */
void loop_timer_isr(void);
void loop_timer_isr(void)
{
    if (step_due)
        late_steps++;
    step_due = 1;
}

/* ------------------------------------------------------------ main */

int main(void)
{
    /* the port is copied into the board by rb_init: a local, so it takes no static RAM */
    const rb_port port = {
        .ctx = NULL,
        .write = port_write,
        .micros = port_micros,
        .read_sensors = port_read_sensors,
        .set_output = port_set_output,
        .nv_save = port_nv_save,
        .nv_load = port_nv_load,
        .body_push = NULL,           /* no disturbance motor on this rig */
    };
    rb_decl_error err;

    hw_init();
    motor_driver_enable(0);          /* the board boots with the motor off */
    uart_init(115200u);              /* receive interrupt still off: rb_board is not ready */
    err = rb_init(&board, &rig, &port,
                  hw_reset_was_power_on() ? RB_BOOT_POWER : RB_BOOT_RESET);
    if (err != RB_DECL_OK) {
        /* A mistake in the tables above: say which entry on the UART, in plain text (a
         * person reads this in a serial terminal), and never drive the motor. */
        char why[64];
        size_t n = rb_text_copy(why, sizeof why, rb_decl_text(&board));   /* may be in flash */
        for (;;) {
            uart_write_nonblocking((const uint8_t *)why, n);
            uart_write_nonblocking((const uint8_t *)"\r\n", 2);
            led_set(1);
            cpu_sleep_until_interrupt();
        }
    }
    uart_rx_irq_enable();
    loop_timer_start(1000000u / LOOP_RATE_HZ);

    for (;;) {
        uint8_t kills;
        if (step_due) {
            step_due = 0;
            rb_step(&board);         /* sensors, safety, loops, motor, telemetry */
        }
        kills = kills_seen;          /* every kill counted so far is in rb_board's ring */
        rb_poll(&board);             /* commands, replies, the kill latched, output sent */
        kills_handled = kills;
        led_set(rb_motor_state(&board) == RB_MOTOR_RUNNING);
        /* Sleep when nothing is due: the timer and UART interrupts wake the core. (Masking
         * interrupts around the test keeps a flag set just after it from being slept
         * through; on cores where a masked interrupt does not wake the core, use the core's
         * own "enable interrupts and sleep" instruction instead.) */
        irq_disable();
        if (!step_due)
            cpu_sleep_until_interrupt();
        irq_enable();
    }
}
