/*
 * rb-sim -- the board library driving a simulated plant on this computer, served on a
 * pseudo-terminal (default) or on stdin/stdout, paced to wall time, so the rigbench host
 * (or any serial program) opens it like a board:
 *
 *   build/rb-sim                      prints the device path, e.g. /dev/pts/7
 *   rigbench info --port /dev/pts/7
 *
 * Time: the board's clock is the nominal time of the period being run -- period k reads its
 * sensors at exactly k / rate after start -- so telemetry and events carry the time the
 * sensors were read, exactly one period apart, not the moment this process got the CPU.
 * After a scheduling delay of up to 0.25 s the periods due are run at once, each stamped
 * with its own nominal time, so plant, board and host stay in step; beyond that (the
 * process suspended or starved) the periods are skipped, not run back to back, and rb-sim
 * reports them on stderr (at most once a second, and totals at exit).
 *
 * The board declares the same parameters, signals and loop as rigbench's simulated
 * `plant` board (bench/rigbench/rig/firmware/boards.py): loop `main`, r/y/u, and drives K e^-sL/(T s+1)^n
 * (host/plant_lag.c). Options:
 *   --stdio            serve on stdin/stdout instead of a pty
 *   --rate HZ          loop rate (500)          --watchdog-ms MS   heartbeat timeout (500)
 *   --order N          lags in the chain (3)    --tau S            each lag's time constant (0.1)
 *   --gain K           static gain (1)          --delay S          dead time (0)
 *   --noise STD        measurement noise (0.001)  --seed N         noise seed (0)
 *   --state FILE       non-volatile storage file (default: in memory, lost at exit)
 *   --board WORD       identity in `hello` (c-plant-1)
 * SIGINT/SIGTERM end it with code 0; end of input on --stdio too. POSIX only.
 */
#define _XOPEN_SOURCE 600
#include "rb_board.h"
#include "plant_lag.h"

#include <errno.h>
#include <fcntl.h>
#include <poll.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <termios.h>
#include <time.h>
#include <unistd.h>

#define CATCH_UP_S 0.25         /* further behind than this, periods are skipped */

/* ------------------------------------------------------------------ the board's variables */

static rb_real main_kp = 0.5, main_ki = 0.25, main_kd = 0, main_dfilt_s = 0.01, main_sp = 0;
static rb_real u_limit = 100, trip_y = 1000;
static rb_real sig_r, sig_y, sig_u, sig_relay;

static const rb_param PARAMS[] = {
    {"main_kp", "1", 0, 1000, &main_kp, 1},
    {"main_ki", "1/s", 0, 1000, &main_ki, 1},
    {"main_kd", "s", 0, 1000, &main_kd, 1},
    {"main_dfilt_s", "s", 0, 10, &main_dfilt_s, 1},
    {"main_sp", "1", -1000, 1000, &main_sp, 1},
    {"u_limit", "1", 0, 1e6, &u_limit, 1},
    {"trip_y", "1", 0, 1e6, &trip_y, 1},
};
static const rb_signal SIGNALS[] = {
    {"r", "1", &sig_r}, {"y", "1", &sig_y}, {"u", "1", &sig_u}, {"relay", "1", &sig_relay},
};
static const rb_loop LOOPS[] = {
    {"main", "y", "u", "main_kp", "main_ki", "main_kd", RB_PLANT_STABLE, RB_RELAY_OUTPUT,
     RB_ACTION_REVERSE, "main_sp", "r", "u_limit", "main_dfilt_s", NULL},
};

/* ------------------------------------------------------------------ the port */

typedef struct {
    int in_fd, out_fd;
    uint32_t clock_us;          /* nominal time of the period being run (see the top) */
    lag_plant plant;
    double pending;             /* command for the next plant step (one-period delay) */
    const char *state_path;
    uint8_t nv[RB_NV_MAX];
    size_t nv_len;
} host;

static size_t port_write(void *ctx, const uint8_t *data, size_t n)
{
    host *h = ctx;
    ssize_t k = write(h->out_fd, data, n);
    return k > 0 ? (size_t)k : 0;          /* never blocks: the board drops telemetry */
}

static uint32_t port_micros(void *ctx)
{
    host *h = ctx;
    return h->clock_us;
}

static void port_read_sensors(void *ctx)
{
    host *h = ctx;
    sig_y = (rb_real)lag_measure(&h->plant);
}

static void port_set_output(void *ctx, rb_real command, int enabled)
{
    host *h = ctx;
    h->pending = enabled ? (double)command : 0.0;
}

static int port_nv_save(void *ctx, const uint8_t *image, size_t n)
{
    host *h = ctx;
    if (h->state_path != NULL) {          /* write a temporary file, sync, rename over */
        char tmp[4096];
        FILE *f;
        int ok;
        snprintf(tmp, sizeof tmp, "%s.tmp", h->state_path);
        f = fopen(tmp, "wb");
        if (f == NULL)
            return -1;
        ok = fwrite(image, 1, n, f) == n && fflush(f) == 0 && fsync(fileno(f)) == 0;
        ok = fclose(f) == 0 && ok;
        if (!ok || rename(tmp, h->state_path) != 0) {
            remove(tmp);
            return -1;
        }
    }
    memcpy(h->nv, image, n);
    h->nv_len = n;
    return 0;
}

static size_t port_nv_load(void *ctx, uint8_t *image, size_t cap)
{
    host *h = ctx;
    if (h->state_path != NULL) {
        FILE *f = fopen(h->state_path, "rb");
        size_t n;
        if (f == NULL)
            return 0;
        n = fread(image, 1, cap, f);
        fclose(f);
        return n;
    }
    if (h->nv_len > cap)
        return 0;
    memcpy(image, h->nv, h->nv_len);
    return h->nv_len;
}

/* ------------------------------------------------------------------ serving */

static volatile sig_atomic_t stop_now;

static void on_signal(int sig)
{
    (void)sig;
    stop_now = 1;
}

static double now_s(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + (double)t.tv_nsec * 1e-9;
}

static int open_pty(int *slave_keep)
{
    struct termios tio;
    const char *path;
    int master = posix_openpt(O_RDWR | O_NOCTTY);
    if (master < 0 || grantpt(master) != 0 || unlockpt(master) != 0)
        return -1;
    path = ptsname(master);
    if (path == NULL)
        return -1;
    *slave_keep = open(path, O_RDWR | O_NOCTTY);   /* kept open: no EIO while unopened */
    if (*slave_keep < 0 || tcgetattr(*slave_keep, &tio) != 0)
        return -1;
    cfmakeraw(&tio);
    if (tcsetattr(*slave_keep, TCSANOW, &tio) != 0 || chmod(path, 0600) != 0)
        return -1;
    printf("%s\n", path);
    fflush(stdout);
    return master;
}

static double arg_num(int argc, char **argv, int *i)
{
    char *end;
    double v;
    if (*i + 1 >= argc) {
        fprintf(stderr, "rb-sim: %s needs a value\n", argv[*i]);
        exit(2);
    }
    v = strtod(argv[++*i], &end);
    if (*end != '\0') {
        fprintf(stderr, "rb-sim: %s: %s is not a number\n", argv[*i - 1], argv[*i]);
        exit(2);
    }
    return v;
}

int main(int argc, char **argv)
{
    static rb_board board;
    static host h;
    rb_rig rig;
    rb_port port;
    rb_decl_error err;
    int i, use_stdio = 0, slave = -1, order = 3, fd;
    double rate = 500, tau = 0.1, gain = 1, delay = 0, noise = 0.001, seed = 0, wd = 500;
    double period, start;
    uint64_t k = 0, missed = 0, missed_reported = 0, late_runs = 0;
    double last_report = 0;
    const char *board_word = "c-plant-1";
    for (i = 1; i < argc; i++) {
        const char *a = argv[i];
        if (strcmp(a, "--stdio") == 0) use_stdio = 1;
        else if (strcmp(a, "--rate") == 0) rate = arg_num(argc, argv, &i);
        else if (strcmp(a, "--watchdog-ms") == 0) wd = arg_num(argc, argv, &i);
        else if (strcmp(a, "--order") == 0) order = (int)arg_num(argc, argv, &i);
        else if (strcmp(a, "--tau") == 0) tau = arg_num(argc, argv, &i);
        else if (strcmp(a, "--gain") == 0) gain = arg_num(argc, argv, &i);
        else if (strcmp(a, "--delay") == 0) delay = arg_num(argc, argv, &i);
        else if (strcmp(a, "--noise") == 0) noise = arg_num(argc, argv, &i);
        else if (strcmp(a, "--seed") == 0) seed = arg_num(argc, argv, &i);
        else if (strcmp(a, "--state") == 0 && i + 1 < argc) h.state_path = argv[++i];
        else if (strcmp(a, "--board") == 0 && i + 1 < argc) board_word = argv[++i];
        else {
            fprintf(stderr, "rb-sim: unknown option %s (see the comment at the top of "
                            "host/main.c)\n", a);
            return 2;
        }
    }
    if (!(rate >= 10 && rate <= 10000) || !(wd >= 1 && wd <= 60000) || seed < 0 ||
        lag_init(&h.plant, order, gain, tau, delay, 1.0 / rate, noise, (uint64_t)seed) != 0) {
        fprintf(stderr, "rb-sim: --rate 10..10000, --watchdog-ms 1..60000, --order 1..8, "
                        "--tau > 0, --delay 0..%d periods, --noise >= 0\n", LAG_MAX_DELAY);
        return 2;
    }
    memset(&rig, 0, sizeof rig);
    rig.board = board_word;
    rig.fw = RB_LIB_VERSION;
    rig.rig = "plant";
    rig.rate_hz = (rb_real)rate;
    rig.watchdog_ms = (uint32_t)wd;
    rig.params = PARAMS;
    rig.n_params = sizeof PARAMS / sizeof PARAMS[0];
    rig.signals = SIGNALS;
    rig.n_signals = sizeof SIGNALS / sizeof SIGNALS[0];
    rig.loops = LOOPS;
    rig.n_loops = 1;
    rig.command = "u";
    rig.simulated = 1;

    signal(SIGINT, on_signal);
    signal(SIGTERM, on_signal);
    signal(SIGPIPE, SIG_IGN);
    if (use_stdio) {
        h.in_fd = 0;
        h.out_fd = 1;
    } else {
        fd = open_pty(&slave);
        if (fd < 0) {
            perror("rb-sim: cannot open a pseudo-terminal");
            return 1;
        }
        h.in_fd = h.out_fd = fd;
    }
    fcntl(h.out_fd, F_SETFL, fcntl(h.out_fd, F_GETFL) | O_NONBLOCK);

    memset(&port, 0, sizeof port);
    port.ctx = &h;
    port.write = port_write;
    port.micros = port_micros;
    port.read_sensors = port_read_sensors;
    port.set_output = port_set_output;
    port.nv_save = port_nv_save;
    port.nv_load = port_nv_load;
    err = rb_init(&board, &rig, &port, RB_BOOT_POWER);
    if (err != RB_DECL_OK) {
        fprintf(stderr, "rb-sim: declaration refused: %s\n", rb_decl_text(&board));
        return 1;
    }
    period = 1.0 / rate;
    start = now_s();
    while (!stop_now) {
        struct pollfd pfd;
        double next = start + (double)(k + 1) * period, wait = next - now_s();
        int ms = wait > 0 ? (int)(wait * 1000.0) : 0;
        pfd.fd = h.in_fd;
        pfd.events = POLLIN;
        pfd.revents = 0;
        if (poll(&pfd, 1, ms) > 0 && (pfd.revents & (POLLIN | POLLHUP | POLLERR))) {
            uint8_t buf[512];
            ssize_t n = read(h.in_fd, buf, sizeof buf);
            if (n > 0) {
                ssize_t j;
                for (j = 0; j < n; j++) {     /* poll before the receive ring can fill */
                    rb_rx_byte(&board, buf[j]);
                    if ((j & 127) == 127)
                        rb_poll(&board);
                }
                rb_poll(&board);
            } else if (n == 0 || (errno != EAGAIN && errno != EINTR && errno != EIO)) {
                if (use_stdio)
                    break;                   /* end of input */
            }
        }
        while (now_s() >= next && !stop_now) {
            /* up to CATCH_UP_S behind, the periods due are run now, each with its own
             * nominal time (the plant and the board stay in step, as the host's timing
             * needs); further behind (suspended, overloaded) the periods beyond are not run:
             * the schedule moves on by them and they are reported */
            uint64_t late = (uint64_t)((now_s() - next) / period);
            if (late > 0)
                late_runs++;
            if ((double)late * period > CATCH_UP_S) {
                uint64_t skip = late - (uint64_t)(CATCH_UP_S / period);
                missed += skip;
                start += (double)skip * period;
            }
            k++;
            h.clock_us = (uint32_t)(uint64_t)((double)k * period * 1e6 + 0.5);
            lag_step(&h.plant, h.pending);
            rb_step(&board);
            rb_poll(&board);
            next = start + (double)(k + 1) * period;
        }
        rb_poll(&board);
        if (missed > missed_reported && now_s() - last_report >= 1.0) {
            fprintf(stderr, "rb-sim: %llu loop periods missed (%llu in all): this process "
                            "was not scheduled in time\n",
                    (unsigned long long)(missed - missed_reported), (unsigned long long)missed);
            missed_reported = missed;
            last_report = now_s();
        }
    }
    if (missed > 0 || late_runs > 0)
        fprintf(stderr, "rb-sim: %llu loop periods run: %llu started late, %llu missed "
                        "(skipped)\n", (unsigned long long)k, (unsigned long long)late_runs,
                (unsigned long long)missed);
    h.pending = 0;
    if (slave >= 0)
        close(slave);
    return 0;
}
