/*
 * BalanceRig -- a reaction-wheel balance rig on a sketch-style board (setup/loop), with the
 * rigbench board library doing the protocol, the two loops and the safety logic.
 *
 * Invented rig and wiring (change every pin to yours):
 *   tilt sensor      analog, pin A0: 0..1023 for -30..+30 deg (an analog inclinometer)
 *   rate gyro        analog, pin A1: 0..1023 for -250..+250 deg/s
 *   wheel encoder    channel A on pin 2 (interrupt), channel B on pin 4, 360 counts/rev
 *   motor driver     PWM on pin 9 (duty = |speed| / 50 rev/s), direction on pin 8,
 *                    enable on pin 7 (HIGH = driver on)
 * The host (rigbench) sees a board with loops `trim` (wheel speed -> tilt set-point) and
 * `tilt` (tilt -> wheel speed command), at 200 Hz.
 *
 * A software kill is not an emergency stop: this rig also needs a hardware cut-off that
 * removes motor power independently of this code (PORTING.md, "Safety").
 *
 * On an 8-bit board build with RB_REAL=float and the small sizes (PORTING.md, "Small
 * boards"); the tables below are RB_FLASH so they stay in flash there.
 */
#include <rb_board.h>

static const int PIN_TILT = A0, PIN_RATE = A1, PIN_ENC_A = 2, PIN_ENC_B = 4;
static const int PIN_PWM = 9, PIN_DIR = 8, PIN_ENABLE = 7;
static const unsigned long LOOP_US = 5000;     /* 200 Hz */
static const float COUNTS_PER_REV = 360.0f;

/* parameters (boot defaults) and signals */
static rb_real tilt_kp = 0.64f, tilt_ki = 9.9f, tilt_kd = 0.0f, tilt_dfilt_s = 0.005f;
static rb_real trim_kp = 0.2f, trim_ki = 0.05f, trim_kd = 0.0f, trim_dfilt_s = 0.05f;
static rb_real wheel_sp = 0.0f, cmd_limit = 50.0f, sp_limit = 5.0f;
static rb_real trip_tilt = 20.0f, trip_wheel = 45.0f, arm_tilt = 3.0f, arm_wheel = 1.0f;
static rb_real sig_tilt, sig_rate, sig_wheel, sig_cmd, sig_sp, sig_relay;

RB_TEXT(t_tilt, "tilt");        RB_TEXT(t_rate, "rate");        RB_TEXT(t_wheel, "wheel");
RB_TEXT(t_cmd, "cmd");          RB_TEXT(t_sp, "sp");            RB_TEXT(t_relay, "relay");
RB_TEXT(t_trim, "trim");
RB_TEXT(t_tilt_kp, "tilt_kp");  RB_TEXT(t_tilt_ki, "tilt_ki");  RB_TEXT(t_tilt_kd, "tilt_kd");
RB_TEXT(t_tilt_df, "tilt_dfilt_s");
RB_TEXT(t_trim_kp, "trim_kp");  RB_TEXT(t_trim_ki, "trim_ki");  RB_TEXT(t_trim_kd, "trim_kd");
RB_TEXT(t_trim_df, "trim_dfilt_s");
RB_TEXT(t_wheel_sp, "wheel_sp"); RB_TEXT(t_cmd_limit, "cmd_limit"); RB_TEXT(t_sp_limit, "sp_limit");
RB_TEXT(t_trip_tilt, "trip_tilt"); RB_TEXT(t_trip_wheel, "trip_wheel");
RB_TEXT(t_arm_tilt, "arm_tilt"); RB_TEXT(t_arm_wheel, "arm_wheel");
RB_TEXT(u_deg, "deg");          RB_TEXT(u_deg_s, "deg/s");      RB_TEXT(u_rev_s, "rev/s");
RB_TEXT(u_s, "s");              RB_TEXT(u_1, "1");
RB_TEXT(u_kp_tilt, "rev/s/deg"); RB_TEXT(u_ki_tilt, "rev/s/deg/s"); RB_TEXT(u_kd_tilt, "rev/deg");
RB_TEXT(u_kp_trim, "deg.s/rev"); RB_TEXT(u_ki_trim, "deg/rev"); RB_TEXT(u_kd_trim, "deg.s2/rev");
RB_TEXT(t_board, "sketch-balance-1"); RB_TEXT(t_fw, "0.1.0"); RB_TEXT(t_balance, "balance");

static const rb_param params[] RB_FLASH = {
    {t_tilt_kp, u_kp_tilt, 0.0f, 10.0f, &tilt_kp, 1},
    {t_tilt_ki, u_ki_tilt, 0.0f, 100.0f, &tilt_ki, 1},
    {t_tilt_kd, u_kd_tilt, 0.0f, 1.0f, &tilt_kd, 1},
    {t_tilt_df, u_s, 0.0f, 0.1f, &tilt_dfilt_s, 1},
    {t_trim_kp, u_kp_trim, 0.0f, 5.0f, &trim_kp, 1},
    {t_trim_ki, u_ki_trim, 0.0f, 5.0f, &trim_ki, 1},
    {t_trim_kd, u_kd_trim, 0.0f, 1.0f, &trim_kd, 1},
    {t_trim_df, u_s, 0.0f, 1.0f, &trim_dfilt_s, 1},
    {t_wheel_sp, u_rev_s, -20.0f, 20.0f, &wheel_sp, 1},
    {t_cmd_limit, u_rev_s, 0.0f, 50.0f, &cmd_limit, 1},
    {t_sp_limit, u_deg, 0.0f, 10.0f, &sp_limit, 1},
    {t_trip_tilt, u_deg, 1.0f, 30.0f, &trip_tilt, 1},
    {t_trip_wheel, u_rev_s, 1.0f, 60.0f, &trip_wheel, 1},
    {t_arm_tilt, u_deg, 0.1f, 10.0f, &arm_tilt, 1},
    {t_arm_wheel, u_rev_s, 0.1f, 20.0f, &arm_wheel, 1},
};

static const rb_signal signals[] RB_FLASH = {
    {t_tilt, u_deg, &sig_tilt}, {t_rate, u_deg_s, &sig_rate}, {t_wheel, u_rev_s, &sig_wheel},
    {t_cmd, u_rev_s, &sig_cmd}, {t_sp, u_deg, &sig_sp}, {t_relay, u_1, &sig_relay},
};

/* outer loop first: its output sp is the tilt loop's set-point (fields in rb_loop order:
 * name, measure, output, kp, ki, kd, plant, relay, action, setpoint, setpoint signal, limit,
 * derivative filter, rate signal) */
static const rb_loop loops[] RB_FLASH = {
    {t_trim, t_wheel, t_sp, t_trim_kp, t_trim_ki, t_trim_kd, RB_PLANT_INTEGRATING,
     RB_RELAY_OUTPUT, RB_ACTION_REVERSE, t_wheel_sp, NULL, t_sp_limit, t_trim_df, NULL},
    {t_tilt, t_tilt, t_cmd, t_tilt_kp, t_tilt_ki, t_tilt_kd, RB_PLANT_UNSTABLE,
     RB_RELAY_INTEGRAL, RB_ACTION_DIRECT, t_sp, t_sp, t_cmd_limit, t_tilt_df, t_rate},
};

static const rb_rig rig RB_FLASH = {
    t_board, t_fw, t_balance, (rb_real)(1000000.0 / LOOP_US), 500,
    params, (uint8_t)(sizeof params / sizeof params[0]),
    signals, (uint8_t)(sizeof signals / sizeof signals[0]),
    loops, (uint8_t)(sizeof loops / sizeof loops[0]),
    t_cmd, 0,
};

static rb_board board;
static volatile long enc_count;
static long enc_last;
static unsigned long next_us;

static void on_encoder(void)       /* channel A rising: B tells the direction */
{
    enc_count += digitalRead(PIN_ENC_B) ? -1 : 1;
}

static size_t port_write(void *ctx, const uint8_t *data, size_t n)
{
    int room = Serial.availableForWrite();   /* never wait for the line */
    (void)ctx;
    if (room <= 0)
        return 0;
    if ((size_t)room < n)
        n = (size_t)room;
    return Serial.write(data, n);
}

static uint32_t port_micros(void *ctx)
{
    (void)ctx;
    return (uint32_t)micros();
}

static void port_read_sensors(void *ctx)
{
    long count;
    (void)ctx;
    noInterrupts();
    count = enc_count;
    interrupts();
    sig_tilt = (rb_real)((analogRead(PIN_TILT) - 511.5f) * (60.0f / 1023.0f));
    sig_rate = (rb_real)((analogRead(PIN_RATE) - 511.5f) * (500.0f / 1023.0f));
    sig_wheel = (rb_real)((float)(count - enc_last) * (1000000.0f / LOOP_US) / COUNTS_PER_REV);
    enc_last = count;
}

/* enabled == 0: driver off (enable pin low), not merely zero speed */
static void port_set_output(void *ctx, rb_real command, int enabled)
{
    float speed = (float)command;
    (void)ctx;
    if (!enabled) {
        digitalWrite(PIN_ENABLE, LOW);
        analogWrite(PIN_PWM, 0);
        return;
    }
    digitalWrite(PIN_DIR, speed < 0 ? LOW : HIGH);
    analogWrite(PIN_PWM, (int)(fabsf(speed) * (255.0f / 50.0f)));
    digitalWrite(PIN_ENABLE, HIGH);
}

void setup()
{
    rb_port port = {NULL, port_write, port_micros, port_read_sensors, port_set_output,
                    NULL, NULL, NULL};      /* no parameter storage: `save` is refused */
    pinMode(PIN_ENABLE, OUTPUT);
    digitalWrite(PIN_ENABLE, LOW);          /* motor off before anything else */
    pinMode(PIN_DIR, OUTPUT);
    pinMode(PIN_PWM, OUTPUT);
    pinMode(PIN_ENC_A, INPUT_PULLUP);
    pinMode(PIN_ENC_B, INPUT_PULLUP);
    attachInterrupt(digitalPinToInterrupt(PIN_ENC_A), on_encoder, RISING);
    Serial.begin(115200);
    if (rb_init(&board, &rig, &port, RB_BOOT_POWER) != RB_DECL_OK) {
        char why[64];
        rb_text_copy(why, sizeof why, rb_decl_text(&board));
        for (;;) {                          /* a mistake in the tables: say which, never drive */
            Serial.println(why);
            delay(1000);
        }
    }
    next_us = micros() + LOOP_US;
}

/* The framework's serial port has its own receive interrupt; bytes reach rb_rx_byte here,
 * so a kill byte acts within one pass of loop(). Keep loop() free of waits. */
void loop()
{
    while (Serial.available() > 0)
        rb_rx_byte(&board, (uint8_t)Serial.read());
    if ((long)(micros() - next_us) >= 0) {
        next_us += LOOP_US;
        if ((long)(micros() - next_us) >= 0)
            next_us = micros() + LOOP_US;   /* fell behind: skip, do not run periods twice */
        rb_step(&board);
    }
    rb_poll(&board);
}
