/*
 * footprint_main.c -- host program behind scripts/footprint_c.py: the size of rb_board, and
 * the time (or, under a call-counting tool, the instructions) the library takes per call on a
 * balance-like rig with a fake port (writes go to a sink, the microsecond clock advances by
 * one loop period per rb_step, sensors are a slow deterministic wave).
 *
 *   footprint_main size                 board_bytes and real_bytes
 *   footprint_main time RUNS N          per case: median and fastest ns per call of RUNS runs
 *                                       of N calls each (after a checked warm-up)
 *   footprint_main count CASE N         the case run N times, nothing timed (for callgrind)
 *
 * Cases (the board armed and holding both loops unless said otherwise):
 *   period_quiet   rb_step + rb_poll, telemetry off (a heartbeat every 100 periods)
 *   period_stream  the same with telemetry at the full loop rate
 *   poll_idle      rb_poll with nothing received and nothing to send
 *   command_set    a `set` of three gains: its bytes through rb_rx_byte, then rb_poll
 *                  (parse, check, apply, reply, hand the reply to the port)
 *
 * Exits 1 with a message when the board does not behave as expected (not running, frames
 * dropped, a command refused), so a figure is never printed for the wrong work.
 */
#define _POSIX_C_SOURCE 199309L
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "rb_board.h"

#define RATE_HZ 500u
#define PERIOD_US (1000000u / RATE_HZ)
#define HB_EVERY 100u                 /* periods between heartbeats: 200 ms of board time */

/* ------------------------------------------------------------ a balance-like rig */

static rb_real tilt_kp = 0.64, tilt_ki = 9.9, tilt_kd = 0.01, tilt_dfilt_s = 0.005;
static rb_real trim_kp = 0.2, trim_ki = 0.05, trim_kd = 0.0, trim_dfilt_s = 0.05;
static rb_real wheel_sp = 0.0, cmd_limit = 50.0, sp_limit = 5.0;
static rb_real trip_tilt = 20.0, trip_wheel = 45.0, arm_tilt = 3.0, arm_wheel = 1.0;
static rb_real sig_tilt, sig_rate, sig_wheel, sig_cmd, sig_sp, sig_relay;

static const rb_param params[] = {
    {"tilt_kp", "rev/s/deg", 0.0, 10.0, &tilt_kp, 1},
    {"tilt_ki", "rev/s/deg/s", 0.0, 100.0, &tilt_ki, 1},
    {"tilt_kd", "rev/deg", 0.0, 1.0, &tilt_kd, 1},
    {"tilt_dfilt_s", "s", 0.0, 0.1, &tilt_dfilt_s, 1},
    {"trim_kp", "deg.s/rev", 0.0, 5.0, &trim_kp, 1},
    {"trim_ki", "deg/rev", 0.0, 5.0, &trim_ki, 1},
    {"trim_kd", "deg.s2/rev", 0.0, 1.0, &trim_kd, 1},
    {"trim_dfilt_s", "s", 0.0, 1.0, &trim_dfilt_s, 1},
    {"wheel_sp", "rev/s", -20.0, 20.0, &wheel_sp, 1},
    {"cmd_limit", "rev/s", 0.0, 50.0, &cmd_limit, 1},
    {"sp_limit", "deg", 0.0, 10.0, &sp_limit, 1},
    {"trip_tilt", "deg", 1.0, 30.0, &trip_tilt, 1},
    {"trip_wheel", "rev/s", 1.0, 60.0, &trip_wheel, 1},
    {"arm_tilt", "deg", 0.1, 10.0, &arm_tilt, 1},
    {"arm_wheel", "rev/s", 0.1, 20.0, &arm_wheel, 1},
};

static const rb_signal signals[] = {
    {"tilt", "deg", &sig_tilt}, {"rate", "deg/s", &sig_rate}, {"wheel", "rev/s", &sig_wheel},
    {"cmd", "rev/s", &sig_cmd}, {"sp", "deg", &sig_sp}, {"relay", "1", &sig_relay},
};

static const rb_loop loops[] = {
    {"trim", "wheel", "sp", "trim_kp", "trim_ki", "trim_kd", RB_PLANT_INTEGRATING,
     RB_RELAY_OUTPUT, RB_ACTION_REVERSE, "wheel_sp", NULL, "sp_limit", "trim_dfilt_s", NULL},
    {"tilt", "tilt", "cmd", "tilt_kp", "tilt_ki", "tilt_kd", RB_PLANT_UNSTABLE,
     RB_RELAY_INTEGRAL, RB_ACTION_DIRECT, "sp", "sp", "cmd_limit", "tilt_dfilt_s", "rate"},
};

static const rb_rig rig = {
    "footprint-1", "1.0.0", "balance", (rb_real)RATE_HZ, 500,
    params, (uint8_t)(sizeof params / sizeof params[0]),
    signals, (uint8_t)(sizeof signals / sizeof signals[0]),
    loops, (uint8_t)(sizeof loops / sizeof loops[0]),
    "cmd", 0,
};

/* ------------------------------------------------------------ the fake port */

static rb_board board;
static uint32_t fake_us = 1000u;
static uint32_t sensor_k;
static unsigned long sink_bytes;
static int checking;                  /* keep what the board writes, to check it */
static char seen[1 << 16];
static size_t seen_n;
static uint8_t nv_store[RB_NV_MAX];
static size_t nv_len;
static volatile rb_real out_cmd;
static volatile int out_enabled;

static size_t fake_write(void *ctx, const uint8_t *data, size_t n)
{
    (void)ctx;
    sink_bytes += n;
    if (checking && seen_n + n < sizeof seen) {
        memcpy(seen + seen_n, data, n);
        seen_n += n;
        seen[seen_n] = '\0';
    }
    return n;
}

static uint32_t fake_micros(void *ctx)
{
    (void)ctx;
    return fake_us;
}

static void fake_read_sensors(void *ctx)
{
    /* a triangle wave of +-0.5 deg and +-0.4 rev/s over 400 periods: the loops do real
     * arithmetic, far from every limit */
    int32_t k = (int32_t)(sensor_k++ % 400u);
    rb_real tri = (rb_real)(k < 200 ? k - 100 : 300 - k) / (rb_real)100.0;
    (void)ctx;
    fake_us += PERIOD_US;
    sig_tilt = (rb_real)0.5 * tri;
    sig_rate = (rb_real)(k < 200 ? 0.5 : -0.5) / (rb_real)100.0 * (rb_real)RATE_HZ;
    sig_wheel = (rb_real)0.4 * tri;
}

static void fake_set_output(void *ctx, rb_real command, int enabled)
{
    (void)ctx;
    out_cmd = command;
    out_enabled = enabled;
}

static int fake_nv_save(void *ctx, const uint8_t *image, size_t n)
{
    (void)ctx;
    memcpy(nv_store, image, n);
    nv_len = n;
    return 0;
}

static size_t fake_nv_load(void *ctx, uint8_t *image, size_t cap)
{
    (void)ctx;
    if (nv_len == 0 || nv_len > cap)
        return 0;
    memcpy(image, nv_store, nv_len);
    return nv_len;
}

static const rb_port port = {
    NULL, fake_write, fake_micros, fake_read_sensors, fake_set_output,
    fake_nv_save, fake_nv_load, NULL,
};

/* ------------------------------------------------------------ driving the board */

static void fail(const char *what)
{
    fprintf(stderr, "footprint_main: %s (motor=%s fault=%s drops=%lu rx_err=%lu)\n", what,
            rb_motor_word(&board), rb_fault_word(&board), (unsigned long)rb_tx_drops(&board),
            (unsigned long)rb_rx_errors(&board));
    exit(1);
}

static size_t make_frame(char *out, const char *body)
{
    size_t n = rb_frame(out, RB_MAX_LINE + 1, body, strlen(body));
    if (n == 0)
        fail("rb_frame refused a body");
    return n;
}

static void feed(const char *frame, size_t n)
{
    size_t i;
    for (i = 0; i < n; i++)
        rb_rx_byte(&board, (uint8_t)frame[i]);
}

static char hb_frame[RB_MAX_LINE + 1];
static size_t hb_len;

static void command(const char *body)
{
    char f[RB_MAX_LINE + 1];
    feed(f, make_frame(f, body));
    rb_poll(&board);
}

static void setup(int stream)
{
    if (rb_init(&board, &rig, &port, RB_BOOT_POWER) != RB_DECL_OK)
        fail(rb_decl_text(&board));
    sensor_k = 0;
    hb_len = make_frame(hb_frame, "hb");
    feed(hb_frame, hb_len);
    command("arm 1");
    command("mode 2 hold");
    command(stream ? "stream 3 rate_hz=500" : "stream 3 rate_hz=0");
    if (rb_motor_state(&board) != RB_MOTOR_RUNNING)
        fail("the board did not start holding");
}

static void run_periods(unsigned long n)
{
    unsigned long i;
    for (i = 0; i < n; i++) {
        if (i % HB_EVERY == 0)
            feed(hb_frame, hb_len);
        rb_step(&board);
        rb_poll(&board);
    }
}

static void run_poll_idle(unsigned long n)
{
    unsigned long i;
    for (i = 0; i < n; i++)
        rb_poll(&board);
}

/* `set` frames with sequence numbers from 10 on, two sets of values taking turns */
static char *set_frames;
static size_t *set_lens;

static void make_set_frames(unsigned long n)
{
    unsigned long i;
    free(set_frames);
    free(set_lens);
    set_frames = malloc(n * (RB_MAX_LINE + 1));
    set_lens = malloc(n * sizeof *set_lens);
    if (set_frames == NULL || set_lens == NULL)
        fail("out of memory");
    for (i = 0; i < n; i++) {
        char body[RB_MAX_BODY + 1];
        snprintf(body, sizeof body, "set %lu %s", (i + 10u) % 65536u,
                 i % 2 ? "tilt_kp=0.7 tilt_ki=11 tilt_kd=0.004"
                       : "tilt_kp=0.64 tilt_ki=9.9 tilt_kd=0.01");
        set_lens[i] = make_frame(set_frames + i * (RB_MAX_LINE + 1), body);
    }
}

static void run_commands(unsigned long n)
{
    unsigned long i;
    for (i = 0; i < n; i++) {
        feed(set_frames + i * (RB_MAX_LINE + 1), set_lens[i]);
        rb_poll(&board);
    }
}

/* ------------------------------------------------------------ cases */

typedef struct {
    const char *name;
    int stream;
    void (*prepare)(unsigned long n);
    void (*run)(unsigned long n);
} fp_case;

static const fp_case CASES[] = {
    {"period_quiet", 0, NULL, run_periods},
    {"period_stream", 1, NULL, run_periods},
    {"poll_idle", 0, NULL, run_poll_idle},
    {"command_set", 0, make_set_frames, run_commands},
};
#define N_CASES (sizeof CASES / sizeof CASES[0])

static void check_case(const fp_case *c)
{
    /* a short checked run: the board kept running, dropped nothing, refused nothing */
    unsigned long n = 2u * HB_EVERY + 5u;
    unsigned long tm = 0;
    const char *p;
    setup(c->stream);
    if (c->prepare)
        c->prepare(n);
    checking = 1;
    seen_n = 0;
    seen[0] = '\0';
    c->run(n);
    checking = 0;
    if (rb_motor_state(&board) != RB_MOTOR_RUNNING || rb_tx_drops(&board) != 0 ||
        rb_rx_errors(&board) != 0)
        fail(c->name);
    if (strstr(seen, "@err ") != NULL)
        fail("a command was refused");
    for (p = seen; (p = strstr(p, "@tm ")) != NULL; p++)
        tm++;
    if (c->stream && c->run == run_periods && tm != n)
        fail("not one telemetry frame per period");
    if (!c->stream && tm != 0)
        fail("telemetry while it was off");
}

static double now_ns(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec * 1e9 + (double)t.tv_nsec;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static int time_cases(int runs, unsigned long n)
{
    size_t c;
    double *ns = malloc((size_t)runs * sizeof *ns);
    if (ns == NULL)
        fail("out of memory");
    for (c = 0; c < N_CASES; c++) {
        int r;
        check_case(&CASES[c]);
        for (r = 0; r < runs; r++) {
            double t0;
            setup(CASES[c].stream);
            if (CASES[c].prepare)
                CASES[c].prepare(n);
            t0 = now_ns();
            CASES[c].run(n);
            ns[r] = (now_ns() - t0) / (double)n;
            if (rb_motor_state(&board) != RB_MOTOR_RUNNING || rb_tx_drops(&board) != 0)
                fail(CASES[c].name);
        }
        qsort(ns, (size_t)runs, sizeof *ns, cmp_double);
        printf("case %s %.1f %.1f %lu\n", CASES[c].name, ns[runs / 2], ns[0], n);
    }
    free(ns);
    return 0;
}

static int count_case(const char *name, unsigned long n)
{
    size_t c;
    for (c = 0; c < N_CASES; c++) {
        if (strcmp(CASES[c].name, name) != 0)
            continue;
        setup(CASES[c].stream);
        if (CASES[c].prepare)
            CASES[c].prepare(n);
        CASES[c].run(n);
        if (rb_motor_state(&board) != RB_MOTOR_RUNNING || rb_tx_drops(&board) != 0)
            fail(name);
        printf("count %s %lu\n", name, n);
        return 0;
    }
    fprintf(stderr, "footprint_main: no case %s\n", name);
    return 2;
}

int main(int argc, char **argv)
{
    if (argc == 2 && strcmp(argv[1], "size") == 0) {
        printf("board_bytes %lu\nreal_bytes %lu\n", (unsigned long)rb_board_size(),
               (unsigned long)sizeof(rb_real));
        return 0;
    }
    if (argc == 4 && strcmp(argv[1], "time") == 0)
        return time_cases(atoi(argv[2]) > 0 ? atoi(argv[2]) : 1, strtoul(argv[3], NULL, 10));
    if (argc == 4 && strcmp(argv[1], "count") == 0)
        return count_case(argv[2], strtoul(argv[3], NULL, 10));
    fprintf(stderr, "usage: footprint_main size | time RUNS N | count CASE N\n");
    return 2;
}
