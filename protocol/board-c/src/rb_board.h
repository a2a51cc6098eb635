/*
 * rb_board.h -- the board side of the rigbench line protocol 1.0 (protocol/PROTOCOL.md),
 * as a portable C99 library: no heap, no globals, nothing beyond the C standard library.
 *
 * What it does for you: framing and CRC-16/IBM-3740 (§2), the command parser and the one
 * reply every command gets (§3-§5), your parameter table with atomic `set`, `save` and
 * `restore` (§5.5), telemetry, status and events (§6), the kill byte acted on in the
 * byte-receive path, the heartbeat watchdog, the motor-off interlock and trip latching (§7),
 * the modes off / hold / relay / open / inject (§8) and a PID per loop in parallel form
 * with derivative on the measurement through a first-order filter, output limits and
 * clamping anti-windup -- the same behaviour as rigbench's simulated board
 * (bench/rigbench/rig/firmware/board*.py), checked against it frame by frame in tests/board_c/.
 *
 * What you write (see PORTING.md): an rb_rig declaring your parameters, signals and loops,
 * and an rb_port of a few functions: write bytes, a microsecond clock, read sensors, set
 * the motor output, load and save parameters.
 *
 * A software kill is not an emergency stop. Every rig needs a hardware cut-off that removes
 * motor power independently of this code and of the host.
 */
#ifndef RB_BOARD_H
#define RB_BOARD_H

#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

/* ------------------------------------------------------------------ build-time sizes */

#ifndef RB_REAL
#define RB_REAL double          /* float on boards without a double FPU (see PORTING.md) */
#endif
typedef RB_REAL rb_real;

#define RB_PROTO_MAJOR 1
#define RB_PROTO_MINOR 0
#define RB_LIB_VERSION "1.0.0"
#define RB_MAX_LINE 200         /* bytes from '@' to '\n' inclusive (§2) */
#define RB_MAX_BODY 193
#define RB_KILL_BYTE 0x18

#ifndef RB_MAX_LOOPS
#define RB_MAX_LOOPS 4          /* loops one board may declare */
#endif
#ifndef RB_RX_RING
#define RB_RX_RING 256          /* bytes between the receive interrupt and rb_poll; 2^n */
#endif
#ifndef RB_TX_SIZE
#define RB_TX_SIZE 4096         /* transmit buffer; telemetry may use all but a quarter */
#endif
#ifndef RB_MAX_STAGED
#define RB_MAX_STAGED 32        /* assignments `stage` keeps for the next `set` (§5.5) */
#endif
#ifndef RB_NV_MAX
#define RB_NV_MAX 512           /* bytes of the stored parameter image (see rb_port.nv_*) */
#endif
#ifndef RB_MAX_LIMITS
#define RB_MAX_LIMITS 8         /* trip_<signal> and arm_<signal> parameters, together */
#endif

/* ------------------------------------------------------------------ constants in flash */

/* On cores that copy every constant into RAM at start-up unless told otherwise (8-bit AVR),
 * the library keeps its own words in program memory and expects your declaration there
 * too: the rb_rig, its tables and every string they point to (PORTING.md, "Small boards").
 * RB_FLASH marks a constant for program memory; RB_TEXT declares a string there:
 *
 *   RB_TEXT(t_tilt, "tilt");  RB_TEXT(t_deg, "deg");
 *   static const rb_signal signals[] RB_FLASH = {{t_tilt, t_deg, &tilt}, ...};
 *   static const rb_rig rig RB_FLASH = {...};
 *
 * Elsewhere both expand to plain constants, so the same declaration builds everywhere.
 * -DRB_USE_FLASH=0 on AVR keeps everything in RAM (plain string literals then work). */
#ifndef RB_USE_FLASH
#if defined(__AVR__)
#define RB_USE_FLASH 1
#else
#define RB_USE_FLASH 0
#endif
#endif
#if RB_USE_FLASH
#include <avr/pgmspace.h>
#define RB_FLASH PROGMEM
#else
#define RB_FLASH
#endif
#define RB_TEXT(id, text) static const char id[] RB_FLASH = text

/* ------------------------------------------------------------------ what you declare */

/* A parameter (§5.2): `value` points at the variable your code reads. Its initial value is
 * the boot default; rb_init loads stored values over it. */
typedef struct {
    const char *name;           /* [a-z][a-z0-9_]{0,31}; trip_<signal>, arm_<signal> mean
                                   something to the board and the host (§5.2, §7.3) */
    const char *unit;           /* a word: deg, rev/s, V, s, 1, ... */
    rb_real min, max;
    rb_real *value;
    uint8_t writable;           /* 0: read-only (access=ro) */
} rb_param;

/* A telemetry signal (§5.3), in stream order. Measured signals are filled by your
 * read_sensors(); a loop's output, its set-point signal and a signal named "relay" are
 * written by the library. */
typedef struct {
    const char *name;
    const char *unit;
    rb_real *value;
} rb_signal;

typedef enum { RB_PLANT_STABLE, RB_PLANT_INTEGRATING, RB_PLANT_UNSTABLE } rb_plant_kind;
typedef enum { RB_RELAY_OUTPUT, RB_RELAY_INTEGRAL } rb_relay_style;
/* §5.4 action: DIRECT e = measure - setpoint (output rises with the measure, for a plant of
 * negative gain such as a balance tilt loop); REVERSE e = setpoint - measure. */
typedef enum { RB_ACTION_DIRECT, RB_ACTION_REVERSE } rb_action;

/* A PID loop (§5.4), named by its parameters and signals. Declare outer loops first: a
 * loop's set-point may be the output signal of a loop declared before it. */
typedef struct {
    const char *name;
    const char *measure;        /* signal */
    const char *output;         /* signal the loop writes */
    const char *kp, *ki, *kd;   /* parameters, parallel form */
    rb_plant_kind plant;
    rb_relay_style relay;
    rb_action action;
    const char *setpoint;       /* parameter, or the output signal of an outer loop */
    const char *setpoint_signal;/* signal showing the set-point in use, or NULL */
    const char *limit;          /* parameter: -limit <= output <= limit */
    const char *dfilt;          /* parameter: derivative filter time constant, s */
    const char *rate;           /* signal measuring d(measure)/dt (a gyro), or NULL */
} rb_loop;

typedef struct {
    const char *board;          /* identity words for `hello` (§5.1) */
    const char *fw;
    const char *rig;
    rb_real rate_hz;            /* rb_step() is called at this rate */
    uint32_t watchdog_ms;       /* heartbeat timeout (§7.2) */
    const rb_param *params;   uint8_t n_params;
    const rb_signal *signals; uint8_t n_signals;
    const rb_loop *loops;     uint8_t n_loops;
    const char *command;        /* the signal that drives the motor (a loop's output) */
    uint8_t simulated;          /* 1: `hello` says sim=1 (the plant is a simulation) */
} rb_rig;

/* ------------------------------------------------------------------ what you implement */

typedef struct {
    void *ctx;                  /* handed back to every function */
    /* Queue bytes for the link without blocking; return how many were taken (0..n). */
    size_t (*write)(void *ctx, const uint8_t *data, size_t n);
    /* A free-running microsecond clock; wraps at 2^32. */
    uint32_t (*micros)(void *ctx);
    /* Fill the variables of the measured signals (called first in every rb_step). */
    void (*read_sensors)(void *ctx);
    /* Drive the motor: `command` in the command signal's unit; enabled == 0 means motor
     * power off. Called once in every rb_step (after the loops, before telemetry), with
     * enabled == 0 whenever the motor leaves `running` (mode off, disarm, a trip, rb_init),
     * and from rb_rx_byte on a kill byte: so it must be safe to call from the receive
     * interrupt, and such a call may cut into one from the main context. */
    void (*set_output)(void *ctx, rb_real command, int enabled);
    /* Non-volatile storage of one opaque image of at most RB_NV_MAX bytes. save returns 0
     * on success (write it so a power cut leaves the old image or the new one); load
     * returns the number of bytes read, 0 when nothing was ever saved. May be NULL. */
    int (*nv_save)(void *ctx, const uint8_t *image, size_t n);
    size_t (*nv_load)(void *ctx, uint8_t *image, size_t cap);
    /* Optional (NULL: none): a push on the body of `torque_Nm` for `time_s`, for the
     * mode `inject at=body` (a simulated rig, or a test stand with a disturbance motor). */
    void (*body_push)(void *ctx, rb_real torque_Nm, rb_real time_s);
} rb_port;

/* ------------------------------------------------------------------ the board */

/* ring indices the receive interrupt shares with rb_poll: one byte wide when the ring is
 * small enough, so an 8-bit core reads them in one access */
#if RB_RX_RING <= 256
typedef uint8_t rb_rx_index;
#else
typedef uint16_t rb_rx_index;
#endif

typedef enum { RB_MOTOR_OFF, RB_MOTOR_ARMED, RB_MOTOR_RUNNING, RB_MOTOR_TRIPPED } rb_motor;
typedef enum { RB_MODE_OFF, RB_MODE_HOLD, RB_MODE_RELAY, RB_MODE_OPEN, RB_MODE_INJECT } rb_mode_kind;
typedef enum { RB_BOOT_POWER, RB_BOOT_RESET } rb_boot_reason;

/* Results of rb_init (a declaration the protocol cannot carry). */
typedef enum {
    RB_DECL_OK = 0, RB_DECL_NAME, RB_DECL_UNIT, RB_DECL_RANGE, RB_DECL_DUPLICATE,
    RB_DECL_LOOP_REF, RB_DECL_TOO_MANY, RB_DECL_RATE, RB_DECL_PORT, RB_DECL_NV_SIZE,
    RB_DECL_LIMITS
} rb_decl_error;

typedef struct {                /* PID state of one loop (library-internal) */
    rb_real integral, dy, y_last, bumpless, last_out, relay;
    uint8_t has_y_last, has_bumpless;
} rb_pid_state;

typedef struct {                /* resolved declaration of one loop (library-internal) */
    uint8_t measure, output, kp, ki, kd, limit, dfilt, reverse, relay_integral;
    int8_t setpoint_param, setpoint_sig, setpoint_show, rate, relay_sig;
} rb_loop_ix;

typedef struct {                /* a body under construction (library-internal): a view of
                                   one of the board's buffers */
    char *s;                    /* RB_MAX_BODY + 1 bytes */
    uint8_t n, overflow;
} rb_line;

typedef struct {                /* the mode in force (§8) */
    rb_mode_kind kind;
    int8_t loop;                /* index, -1 for none */
    rb_real amp, hyst, bias, bound, out, time_s;
    uint8_t has_bound, shape_step, at;   /* at: 0 setpoint, 1 output, 2 body */
    uint32_t periods, end_periods;       /* periods run, periods until a timed mode ends */
} rb_mode_run;

typedef struct {                /* a trip_<signal> or arm_<signal> parameter (library-internal) */
    uint8_t param, signal, trip;         /* trip: 1 trip_, 0 arm_ */
} rb_limit;

#if RB_TX_SIZE <= 65535
typedef uint16_t rb_tx_index;
#else
typedef uint32_t rb_tx_index;
#endif

#ifndef RB_KEEP_LAST_BODY
#define RB_KEEP_LAST_BODY 1     /* 0: recognise a resent command by length and CRC-16 of
                                   its body instead of the whole body (194 bytes less) */
#endif

typedef struct rb_board {
    /* small fields first: on 8-bit cores a field within 64 bytes of the start is one
     * instruction away, one further out four */
    const rb_rig *rig;          /* &rig_copy once rb_init accepted it, NULL before */
    uint8_t motor;              /* rb_motor */
    uint8_t has_fault, hb_seen, has_last, n_limits;
    int8_t command_sig, relay_sig;
    /* receive: an interrupt-safe ring, then the line assembler */
    volatile rb_rx_index rx_head, rx_tail;  /* written by one side each: no lock needed */
    volatile uint8_t kill_pending;          /* set by the interrupt, cleared by rb_poll */
    volatile uint8_t rx_lost;               /* bytes the full ring refused (wraps) */
    uint8_t rx_lost_seen, line_len, rx_state;
    rb_tx_index tx_head, tx_used;
    uint32_t periods;           /* rb_step calls since boot */
    uint32_t status_every, stream_div;
    uint32_t frame, drops, rx_err;
    uint32_t boot_us, hb_us;
    rb_real dt_s, pending_cmd;
    const char *last_rx_error;  /* code of the last unreadable frame (diagnostics) */
    const char *decl_error;     /* what rb_init refused, NULL when it did not */
    /* last answered command (§4.2): its reply is built in place in last_line and kept
     * there as a whole frame for a resend */
    uint16_t last_seq;
    uint8_t last_body_len, last_line_len;
#if !RB_KEEP_LAST_BODY
    uint16_t last_body_crc;
#endif
    rb_line out_reply, out_event;
    /* `stage` (§5.5): assignments checked and kept for the next `set` */
    uint8_t n_staged;
    uint8_t staged_ix[RB_MAX_STAGED];
    rb_real staged_val[RB_MAX_STAGED];
    rb_port port;
    rb_mode_run mode;
    rb_rig rig_copy;            /* the declaration's top level, read once (it may be in flash) */
    rb_loop_ix lx[RB_MAX_LOOPS];
    rb_pid_state pid[RB_MAX_LOOPS];
    rb_limit limits[RB_MAX_LIMITS];
    char fault[40];             /* latched trip cause; "none" when none */
    volatile uint8_t rx_ring[RB_RX_RING];
    uint8_t line[RB_MAX_LINE];
#if RB_KEEP_LAST_BODY
    char last_body[RB_MAX_BODY + 1];
#endif
    uint8_t last_line[RB_MAX_LINE];
    /* events, telemetry and status are built in ev, from ev + 1 on, so that the frame is
     * completed around the body in place; the stored image uses the same bytes while it
     * is read or written (never at the same time as an event) */
    union {
        char ev[RB_MAX_LINE];
        uint8_t nv[RB_NV_MAX];
    } buf;
    uint8_t tx[RB_TX_SIZE];     /* transmit */
} rb_board;

/* Check the declaration, load stored parameters, send `ev boot`. Returns RB_DECL_OK or
 * what is wrong; rb_decl_text() says it in words (which entry). Call once at boot. */
rb_decl_error rb_init(rb_board *b, const rb_rig *rig, const rb_port *port,
                      rb_boot_reason reason);
const char *rb_decl_text(const rb_board *b);

/* One received byte. Safe to call from the UART receive interrupt: it only fills the ring,
 * and on the kill byte switches the motor off at once through port.set_output. */
void rb_rx_byte(rb_board *b, uint8_t byte);
/* The same for a block of received bytes (a DMA or USB receive callback). */
void rb_rx_block(rb_board *b, const uint8_t *data, size_t n);
/* Handle the bytes received so far (commands answered, kill acted on in stream order) and
 * push queued output to port.write. Call often from the main context. */
void rb_poll(rb_board *b);
/* One loop period: sensors, safety, the loops under the present mode, motor output,
 * telemetry and status. Call at rig->rate_hz, never concurrently with rb_poll. A kill byte
 * received since the last rb_poll is handled first (the bytes before it in stream order,
 * then the trip), so the motor cannot come back on between the byte and rb_poll. */
void rb_step(rb_board *b);

/* Read-only views for your own code (a status LED, a local display, tests). With
 * RB_USE_FLASH (AVR) the words of rb_motor_word, rb_last_rx_error and rb_decl_text are in
 * flash (print them with your C library's _P functions); rb_fault_word's is in RAM. */
rb_motor rb_motor_state(const rb_board *b);
const char *rb_motor_word(const rb_board *b);
const char *rb_fault_word(const rb_board *b);     /* "none" when no fault is latched */
uint32_t rb_rx_errors(const rb_board *b);
uint32_t rb_tx_drops(const rb_board *b);
const char *rb_last_rx_error(const rb_board *b);  /* "none" or a §2-§3 error code */
/* Copy one of the words above into RAM (wherever it is kept) as a '\0'-ended string;
 * returns its length (cut to cap - 1). */
size_t rb_text_copy(char *out, size_t cap, const char *word);
/* Trip from your own code (a limit switch, an over-current comparator): motor off, the
 * cause latched and reported as `ev trip cause=<cause>` (a name, <= 32 characters).
 * Main context only (like rb_poll and rb_step), not from an interrupt: for a hardware
 * fault line, cut the driver in hardware and call rb_trip from the main loop. */
void rb_trip(rb_board *b, const char *cause);

/* Building blocks, exported for tests and for boards that want them. */
uint16_t rb_crc16(const uint8_t *data, size_t n);
uint16_t rb_crc16_update(uint16_t crc, const uint8_t *data, size_t n);
/* Wrap a body into a frame "@body|CRC\n"; returns its length, 0 if the body is illegal. */
size_t rb_frame(char *out, size_t cap, const char *body, size_t n);
/* A number as the protocol writes it: `digits` (1..7) significant digits, correctly
 * rounded, no "e+07" padding, never "-0"; the text of bench/rigbench/wire's format_number. Integer
 * arithmetic only (no printf, no floating-point routines). Returns the length, 0 if it
 * does not fit in cap - 1 characters (16 always do) or is not finite. */
size_t rb_format_number(char *out, size_t cap, double value, int digits);
/* The protocol's number grammar (§3), correctly rounded to the nearest double as Python's
 * float() reads it; a token of 64 characters or more, or a value beyond the largest double,
 * is refused. Returns 1 and sets *out on success. Integer arithmetic only. */
int rb_parse_number(const char *tok, size_t n, double *out);

size_t rb_board_size(void);     /* sizeof(rb_board), for bindings that allocate it */

#ifdef __cplusplus
}
#endif
#endif /* RB_BOARD_H */
