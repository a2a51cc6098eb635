/*
 * rb_cmd.c -- host commands (PROTOCOL.md §4-§8): the grammar of a body, the handler of each
 * verb, and the one reply every command gets. Follows bench/wire/messages.py
 * (parse_host_body), bench/rig/firmware.py (_answer_bad, _command) and
 * firmware_commands.py / firmware_modes.py, so both boards give the same answers.
 *
 * The reply is built in place in the board's last_line (where it stays, framed, for a
 * resend, §4.2); refusal texts are assembled piece by piece in the context, from constant
 * words (in flash with RB_USE_FLASH) and received or computed text (in RAM).
 */
#include "rb_internal.h"

#include <string.h>

#define OPEN_MAX_S 10       /* §8: an open-loop run lasts at most 10 s */
#define INJECT_MAX_S 60     /* rigbench's own bound on an injection */
#define ERR_TEXT_MAX 80     /* firmware.py refusal_text */

/* verbs, in the order of the enum below; from V_SAVE on they take no arguments */
#define VERB_WORDS "hello\0param\0signal\0loop\0get\0set\0mode\0stream\0stage\0" \
                   "save\0restore\0arm\0disarm\0clear\0kill\0status\0"
enum { V_HELLO, V_PARAM, V_SIGNAL, V_LOOP, V_GET, V_SET, V_MODE, V_STREAM, V_STAGE, V_SAVE, V_RESTORE,
       V_ARM, V_DISARM, V_CLEAR, V_KILL, V_STATUS };
#define BOARD_VERB_WORDS "ok\0err\0tm\0st\0ev\0"
#define MODE_WORDS "off\0hold\0relay\0open\0inject\0"

typedef struct {
    rb_board *b;
    const char *body;
    rb_tok *t;
    int nt;
    uint16_t seq;
    rb_line *reply;         /* the board's out_reply, inside last_line */
    const char *err;        /* error code (a constant), NULL: the reply is ok */
    char text[96];          /* err text, RAM */
    uint8_t tn;
} rb_ctx;

#define TOKP(c, i) ((c)->body + (c)->t[(i)].at)
#define TOKN(c, i) ((size_t)(c)->t[(i)].n)

/* ------------------------------------------------------------------ refusal texts */

static void say_ram(rb_ctx *c, const char *s, size_t n)
{
    while (n-- > 0 && c->tn < sizeof c->text - 1)
        c->text[c->tn++] = *s++;
}

static void say(rb_ctx *c, const char *rom)
{
    uint8_t ch;
    while ((ch = ROM_U8(rom++)) != 0 && c->tn < sizeof c->text - 1)
        c->text[c->tn++] = (char)ch;
}

static void say_num(rb_ctx *c, rb_real v, int digits)
{
    char num[RB_NUM_TEXT];
    say_ram(c, num, rb_format_real(num, sizeof num, v, digits));
}

/* refuse with `rom_code` and a text starting with `rom_text` (NULL for none) */
static void refuse(rb_ctx *c, const char *rom_code, const char *rom_text)
{
    c->err = rom_code;
    c->tn = 0;
    if (rom_text != NULL)
        say(c, rom_text);
}

static size_t clean_text(rb_ctx *c)
{
    /* err text: at most 80 printable characters, no '|' or '@', no trailing space
     * (firmware.py refusal_text) */
    size_t i, n = c->tn < ERR_TEXT_MAX ? c->tn : ERR_TEXT_MAX;
    for (i = 0; i < n; i++) {
        char ch = c->text[i];
        if (ch == '|')
            c->text[i] = '/';
        else if (ch == '@' || ch < 0x20 || ch > 0x7E)
            c->text[i] = '?';
    }
    while (n > 0 && c->text[n - 1] == ' ')
        n--;
    return n;
}

/* ------------------------------------------------------------------ grammar helpers */

static size_t key_len(rb_ctx *c, int i)
{
    size_t n = 0;
    while (n < TOKN(c, i) && TOKP(c, i)[n] != '=')
        n++;
    return n;
}

static int fields_ok(rb_ctx *c, int from)
{
    /* key=value tokens, keys names, values words, no key twice (§3) */
    int i, j;
    for (i = from; i < c->nt; i++) {
        const char *s = TOKP(c, i);
        size_t n = TOKN(c, i), eq = key_len(c, i);
        if (eq == n || !rb_is_name(s, eq) || !rb_is_word(s + eq + 1, n - eq - 1))
            return 0;
        for (j = from; j < i; j++)
            if (key_len(c, j) == eq && memcmp(TOKP(c, j), s, eq) == 0)
                return 0;
    }
    return 1;
}

static int field(rb_ctx *c, int from, const char *rom_key, const char **val, size_t *vn)
{
    int i;
    for (i = from; i < c->nt; i++) {
        size_t k = key_len(c, i);
        if (rb_rom_eq(rom_key, TOKP(c, i), k)) {
            *val = TOKP(c, i) + k + 1;
            *vn = TOKN(c, i) - k - 1;
            return 1;
        }
    }
    return 0;
}

static const char *param_name(const rb_board *b, int i)
{
    return (const char *)ROM_PTR(&b->rig->params[i].name);
}

/* ------------------------------------------------------------------ handlers */

static void on_hello(rb_ctx *c)
{
    const rb_rig *r = c->b->rig;
    const char *v = TOKP(c, 2);
    uint32_t major = 0;
    size_t i = 0;
    while (v[i] != '.')
        major = major * 10u + (uint32_t)(v[i++] - '0');
    if (major != RB_PROTO_MAJOR) {
        refuse(c, S("version"), S("board speaks 1.0"));
        return;
    }
    rb_ln_kv(c->reply, S("proto"), S("1.0"));
    rb_ln_kv(c->reply, S("board"), r->board);
    rb_ln_kv(c->reply, S("fw"), r->fw);
    rb_ln_kv(c->reply, S("rig"), r->rig);
    rb_ln_kv_num(c->reply, S("rate_hz"), r->rate_hz);
    rb_ln_kv_u32(c->reply, S("watchdog_ms"), r->watchdog_ms);
    rb_ln_kv_u32(c->reply, S("params"), r->n_params);
    rb_ln_kv_u32(c->reply, S("signals"), r->n_signals);
    rb_ln_kv_u32(c->reply, S("loops"), r->n_loops);
    if (r->simulated)
        rb_ln_kv(c->reply, S("sim"), S("1"));
}

static void on_describe(rb_ctx *c, uint32_t index, int verb)
{
    const rb_rig *r = c->b->rig;
    rb_line *l = c->reply;
    char num[4];
    size_t nn = rb_u32_text(num, index);
    if (verb == V_PARAM) {
        rb_param p;
        if (index >= r->n_params) {
            refuse(c, S("unknown_name"), S("no parameter "));
            say_ram(c, num, nn);
            return;
        }
        rb_param_get(c->b, (int)index, &p);
        rb_ln_kv_u32(l, S("index"), index);
        rb_ln_kv(l, S("name"), p.name);
        rb_ln_kv(l, S("unit"), p.unit);
        rb_ln_kv_num(l, S("min"), p.min);
        rb_ln_kv_num(l, S("max"), p.max);
        rb_ln_kv_num(l, S("value"), *p.value);
        rb_ln_kv(l, S("access"), p.writable ? S("rw") : S("ro"));
    } else if (verb == V_SIGNAL) {
        rb_signal s;
        if (index >= r->n_signals) {
            refuse(c, S("unknown_name"), S("no signal "));
            say_ram(c, num, nn);
            return;
        }
        ROM_COPY(&s, &r->signals[index], sizeof s);
        rb_ln_kv_u32(l, S("index"), index);
        rb_ln_kv(l, S("name"), s.name);
        rb_ln_kv(l, S("unit"), s.unit);
    } else {
        rb_loop d;
        if (index >= r->n_loops) {
            refuse(c, S("unknown_name"), S("no loop "));
            say_ram(c, num, nn);
            return;
        }
        rb_loop_get(c->b, (int)index, &d);
        rb_ln_kv_u32(l, S("index"), index);
        rb_ln_kv(l, S("name"), d.name);
        rb_ln_kv(l, S("measure"), d.measure);
        rb_ln_kv(l, S("output"), d.output);
        rb_ln_kv(l, S("gains"), d.kp);
        rb_ln_raw(l, ",", 1);
        rb_ln_rom(l, d.ki);
        rb_ln_raw(l, ",", 1);
        rb_ln_rom(l, d.kd);
        rb_ln_kv(l, S("plant"), rb_rom_word(S("stable\0integrating\0unstable\0"), (int)d.plant));
        rb_ln_kv(l, S("relay"), d.relay == RB_RELAY_INTEGRAL ? S("integral") : S("output"));
        rb_ln_kv(l, S("setpoint"), d.setpoint_signal != NULL ? d.setpoint_signal : d.setpoint);
        rb_ln_kv(l, S("limit"), d.limit);
        rb_ln_kv(l, S("dfilt"), d.dfilt);
        if (d.rate != NULL)
            rb_ln_kv(l, S("rate"), d.rate);
        rb_ln_kv(l, S("action"), d.action == RB_ACTION_REVERSE ? S("reverse") : S("direct"));
    }
}

static int known_param(rb_ctx *c, const char *s, size_t n)
{
    int i = rb_param_index(c->b, s, n);
    if (i < 0) {
        refuse(c, S("unknown_name"), S("no parameter "));
        say_ram(c, s, n);
    }
    return i;
}

static void on_get(rb_ctx *c)
{
    int i, j;
    for (i = 2; i < c->nt; i++)
        for (j = 2; j < i; j++)
            if (TOKN(c, i) == TOKN(c, j) && memcmp(TOKP(c, i), TOKP(c, j), TOKN(c, i)) == 0) {
                refuse(c, S("bad_args"), S("a name given twice"));
                return;
            }
    for (i = 2; i < c->nt; i++)
        if (known_param(c, TOKP(c, i), TOKN(c, i)) < 0)
            return;
    for (i = 2; i < c->nt; i++) {
        int p = rb_param_index(c->b, TOKP(c, i), TOKN(c, i));
        rb_ln_kv_num(c->reply, param_name(c->b, p), RB_PAR(c->b, p));
    }
}

static rb_real token_value(rb_ctx *c, int i)
{
    /* the number of a name=value token the grammar check already accepted, as the board
     * stores it (7 significant digits) */
    size_t k = key_len(c, i);
    rb_real v = 0;
    rb_parse_real(TOKP(c, i) + k + 1, TOKN(c, i) - k - 1, &v);
    return rb_round_real(v);
}

static int check_assigns(rb_ctx *c, int reply)
{
    /* every assignment of a set or stage (§5.5): 0 at the first refusal, 1 when all are
     * legal; ``reply`` adds the values as they will be applied to the reply */
    rb_board *b = c->b;
    int i;
    for (i = 2; i < c->nt; i++) {
        size_t k = key_len(c, i);
        rb_param p;
        rb_real v;
        int pi = known_param(c, TOKP(c, i), k);
        if (pi < 0)
            return 0;
        rb_param_get(b, pi, &p);
        if (!p.writable) {
            refuse(c, S("readonly"), p.name);
            say(c, S(" is read-only"));
            return 0;
        }
        v = token_value(c, i);
        if (!(p.min <= v && v <= p.max)) {
            refuse(c, S("range"), p.name);
            say(c, S(" "));
            say_num(c, p.min, 7);
            say(c, S(".."));
            say_num(c, p.max, 7);
            return 0;
        }
        if (rb_gain_busy(b, pi)) {
            refuse(c, S("busy"), p.name);
            say(c, S(" belongs to a loop under test"));
            return 0;
        }
        if (reply)
            rb_ln_kv_num(c->reply, p.name, v);
    }
    return 1;
}

static int staged_already(rb_ctx *c, uint8_t n)
{
    /* 1 when an assignment of this frame names a parameter staged before */
    int i, j;
    for (i = 2; i < c->nt; i++) {
        int pi = rb_param_index(c->b, TOKP(c, i), key_len(c, i));
        for (j = 0; pi >= 0 && j < n; j++)
            if (c->b->staged_ix[j] == pi)
                return 1;
    }
    return 0;
}

static void on_set(rb_ctx *c)
{
    /* atomic (§5.5): the staged group and every assignment checked, the reply built, then
     * all applied (the tokens are read twice rather than kept: less stack on a small
     * board). The staged group is used or dropped here. */
    rb_board *b = c->b;
    uint8_t n = b->n_staged, j;
    int i;
    b->n_staged = 0;
    if (staged_already(c, n)) {
        refuse(c, S("bad_args"), S("a name staged and set again"));
        return;
    }
    for (j = 0; j < n; j++)
        if (rb_gain_busy(b, b->staged_ix[j])) {
            rb_param p;
            rb_param_get(b, b->staged_ix[j], &p);
            refuse(c, S("busy"), p.name);
            say(c, S(" belongs to a loop under test"));
            return;
        }
    if (!check_assigns(c, 1))
        return;
    if (c->reply->overflow) {
        refuse(c, S("bad_args"), S("reply would not fit in one line; set fewer"));
        return;
    }
    for (j = 0; j < n; j++)
        RB_PAR(b, b->staged_ix[j]) = b->staged_val[j];
    for (i = 2; i < c->nt; i++)
        RB_PAR(b, rb_param_index(b, TOKP(c, i), key_len(c, i))) = token_value(c, i);
}

static void on_stage(rb_ctx *c)
{
    /* §5.5: check the assignments and keep them for the next `set`; a refusal drops the
     * whole group */
    rb_board *b = c->b;
    uint8_t n = b->n_staged;
    int i;
    b->n_staged = 0;
    if (staged_already(c, n)) {
        refuse(c, S("bad_args"), S("a name staged twice"));
        return;
    }
    if (!check_assigns(c, 0))
        return;
    if (n + (c->nt - 2) > RB_MAX_STAGED) {
        refuse(c, S("bad_args"), S("more assignments than this board can stage"));
        return;
    }
    for (i = 2; i < c->nt; i++) {
        b->staged_ix[n] = (uint8_t)rb_param_index(b, TOKP(c, i), key_len(c, i));
        b->staged_val[n] = token_value(c, i);
        n++;
    }
    b->n_staged = n;
    rb_ln_kv_u32(c->reply, S("staged"), n);
}

static uint32_t floor_u32(rb_real x)
{
    return (uint32_t)x;              /* 0 <= x < 2^32 */
}

static void on_stream(rb_ctx *c, rb_real rate)
{
    /* the nearest loop rate / n (§6.1); below loop rate / STREAM_DIV_MAX the slowest
     * (firmware_commands.py _on_stream). In float the bound is the largest float below
     * 2^32, which a conversion to 32 bits can take. */
    const rb_real div_max = sizeof(rb_real) < sizeof(double) ? (rb_real)4294967040.0
                                                             : (rb_real)4294967295.0;
    rb_board *b = c->b;
    rb_real loop_hz = b->rig->rate_hz, ratio, elo, ehi;
    uint32_t lo, hi, div;
    if (rate < 0) {
        refuse(c, S("range"), S("rate_hz 0.."));
        say_num(c, loop_hz, 6);
        return;
    }
    if (rate == 0) {
        b->stream_div = 0;
        rb_ln_kv_u32(c->reply, S("rate_hz"), 0);
        return;
    }
    ratio = loop_hz / rate;
    if (!(ratio < div_max))
        ratio = div_max;
    lo = floor_u32(ratio);
    hi = lo + ((rb_real)lo < ratio);
    lo = lo < 1 ? 1 : lo;
    hi = hi < 1 ? 1 : hi;
    elo = loop_hz / (rb_real)lo - rate;
    ehi = loop_hz / (rb_real)hi - rate;
    div = RB_ABS(elo) <= RB_ABS(ehi) ? lo : hi;
    b->stream_div = div;
    rb_ln_kv_num(c->reply, S("rate_hz"), loop_hz / (rb_real)div);
}

/* mode fields: required keys, optional keys (firmware_modes.py) */
static const char *mode_required(int kind)
{
    switch (kind) {
    case RB_MODE_RELAY: return S("loop\0amp\0");
    case RB_MODE_OPEN: return S("loop\0out\0time_s\0");
    case RB_MODE_INJECT: return S("loop\0at\0amp\0time_s\0");
    default: return S("");
    }
}

static const char *mode_optional(int kind)
{
    switch (kind) {
    case RB_MODE_RELAY: return S("hyst\0bias\0bound\0");
    case RB_MODE_INJECT: return S("shape\0");
    default: return S("");
    }
}

static int mode_number(rb_ctx *c, const char *rom_key, rb_real *out)
{
    const char *v;
    size_t n;
    if (!field(c, 3, rom_key, &v, &n))
        return 0;
    if (!rb_parse_real(v, n, out)) {
        refuse(c, S("bad_args"), rom_key);
        say(c, S(" is not a number"));
        return -1;
    }
    return 1;
}

static int mode_fields(rb_ctx *c, int kind, rb_mode_run *run)
{
    /* the fields of `mode <kind>` checked and read into run; 0 when refused */
    rb_board *b = c->b;
    const char *v;
    size_t vn;
    int i, loop, has_bound = 0;
    const char *req = mode_required(kind), *w;
    for (i = 3; i < c->nt; i++) {
        size_t k = key_len(c, i);
        if (rb_rom_find(req, TOKP(c, i), k) < 0 && rb_rom_find(mode_optional(kind), TOKP(c, i), k) < 0) {
            refuse(c, S("bad_args"), rb_rom_word(S(MODE_WORDS), kind));
            say(c, S(" takes no "));
            say_ram(c, TOKP(c, i), k);
            return 0;
        }
    }
    for (w = req; ROM_U8(w) != 0; w += rb_rom_len(w) + 1) {
        if (!field(c, 3, w, &v, &vn)) {
            refuse(c, S("bad_args"), rb_rom_word(S(MODE_WORDS), kind));
            say(c, S(" needs "));
            say(c, w);
            say(c, S("="));
            return 0;
        }
    }
    if (kind < RB_MODE_RELAY)
        return 1;
    field(c, 3, S("loop"), &v, &vn);
    loop = rb_loop_index(b, v, vn);
    if (loop < 0) {
        refuse(c, S("unknown_name"), S("no loop "));
        say_ram(c, v, vn);
        return 0;
    }
    run->loop = (int8_t)loop;
    /* numbers in the order firmware_modes.py reads them: optional keys first */
    if (kind == RB_MODE_RELAY) {
        if (mode_number(c, S("hyst"), &run->hyst) < 0 || mode_number(c, S("bias"), &run->bias) < 0)
            return 0;
        has_bound = mode_number(c, S("bound"), &run->bound);
        if (has_bound < 0 || mode_number(c, S("amp"), &run->amp) < 0)
            return 0;
        run->has_bound = (uint8_t)has_bound;
    } else if (kind == RB_MODE_OPEN) {
        if (mode_number(c, S("out"), &run->out) < 0 || mode_number(c, S("time_s"), &run->time_s) < 0)
            return 0;
    } else {
        if (mode_number(c, S("amp"), &run->amp) < 0 || mode_number(c, S("time_s"), &run->time_s) < 0)
            return 0;
        if (field(c, 3, S("shape"), &v, &vn)) {
            int shape = rb_rom_find(S("pulse\0step\0"), v, vn);
            if (shape < 0) {
                refuse(c, S("bad_args"), S("shape must be pulse or step"));
                return 0;
            }
            run->shape_step = (uint8_t)shape;
        }
        field(c, 3, S("at"), &v, &vn);
        i = rb_rom_find(S("setpoint\0output\0body\0"), v, vn);
        if (i < 0) {
            refuse(c, S("bad_args"), S("at must be setpoint, output or body"));
            return 0;
        }
        run->at = (uint8_t)i;
    }
    return 1;
}

static int mode_ranges(rb_ctx *c, int kind, const rb_mode_run *run)
{
    rb_board *b = c->b;
    if (kind == RB_MODE_RELAY) {
        if (run->amp <= 0) {
            refuse(c, S("range"), S("amp > 0"));
            return 0;
        }
        if (run->hyst < 0) {
            refuse(c, S("range"), S("hyst >= 0"));
            return 0;
        }
        if (run->has_bound && run->bound <= 0) {
            refuse(c, S("range"), S("bound > 0"));
            return 0;
        }
    } else if (kind == RB_MODE_OPEN) {
        rb_real limit = RB_PAR(b, b->lx[run->loop].limit);
        if (RB_ABS(run->out) > limit) {
            refuse(c, S("range"), S("out "));
            say_num(c, -limit, 6);
            say(c, S(".."));
            say_num(c, limit, 6);
            return 0;
        }
        if (!(0 < run->time_s && run->time_s <= OPEN_MAX_S)) {
            refuse(c, S("range"), S("time_s 0..10"));
            return 0;
        }
    } else if (kind == RB_MODE_INJECT) {
        if (!(0 < run->time_s && run->time_s <= INJECT_MAX_S)) {
            refuse(c, S("range"), S("time_s 0..60"));
            return 0;
        }
        if (run->at == 2 && b->port.body_push == NULL) {
            refuse(c, S("unknown_name"), S("at=body: this rig has no body push"));
            return 0;
        }
    }
    return 1;
}

static void on_mode(rb_ctx *c, int kind)
{
    rb_board *b = c->b;
    rb_mode_run run;
    int stop = kind == RB_MODE_OFF;
    memset(&run, 0, sizeof run);
    run.kind = (rb_mode_kind)kind;
    run.loop = -1;
    if (!mode_fields(c, kind, &run) || !mode_ranges(c, kind, &run))
        return;
    /* the motor state (§7.3) */
    if (!stop && b->motor != RB_MOTOR_ARMED && b->motor != RB_MOTOR_RUNNING) {
        refuse(c, S("not_armed"), S("motor "));
        say(c, rb_motor_word(b));
        return;
    }
    if (kind == RB_MODE_INJECT && b->mode.kind != RB_MODE_HOLD) {
        refuse(c, S("state"), S("inject starts from hold"));
        return;
    }
    if (stop) {
        rb_happen(b, RB_H_STOP);
        if (b->mode.kind != RB_MODE_OFF)
            rb_set_mode(b, &run);
    } else {
        rb_happen(b, RB_H_RUN);
        rb_set_mode(b, &run);
    }
    rb_ln_kv(c->reply, S("mode"), rb_rom_word(S(MODE_WORDS), kind));
    if (kind >= RB_MODE_RELAY)
        rb_ln_kv(c->reply, S("loop"), (const char *)ROM_PTR(&b->rig->loops[run.loop].name));
    if (kind == RB_MODE_RELAY) {
        rb_ln_kv_num(c->reply, S("amp"), run.amp);
        rb_ln_kv_num(c->reply, S("hyst"), run.hyst);
        rb_ln_kv_num(c->reply, S("bias"), run.bias);
        if (run.has_bound)
            rb_ln_kv_num(c->reply, S("bound"), run.bound);
    } else if (kind == RB_MODE_OPEN) {
        rb_ln_kv_num(c->reply, S("out"), run.out);
        rb_ln_kv_num(c->reply, S("time_s"), run.time_s);
    } else if (kind == RB_MODE_INJECT) {
        rb_ln_kv(c->reply, S("shape"), run.shape_step ? S("step") : S("pulse"));
        rb_ln_kv(c->reply, S("at"), rb_rom_word(S("setpoint\0output\0body\0"), run.at));
        rb_ln_kv_num(c->reply, S("amp"), run.amp);
        rb_ln_kv_num(c->reply, S("time_s"), run.time_s);
    }
}

static void on_simple(rb_ctx *c, int verb)
{
    rb_board *b = c->b;
    char why[96];      /* "fault,heartbeat,<arm_ signals>,gains" */
    size_t n;
    switch (verb) {
    case V_SAVE: {
        uint16_t crc = 0;
        uint8_t tail[6];
        int count = rb_nv_save_image(b, &crc);
        if (count < 0) {
            refuse(c, S("storage"), S("write failed"));
            return;
        }
        rb_crc_tail(tail, crc);                    /* "|XXXX\n": the four hex digits */
        rb_ln_kv_u32(c->reply, S("count"), (uint32_t)count);
        rb_ln_kv_ram(c->reply, S("crc"), (const char *)tail + 1, 4);
        break;
    }
    case V_RESTORE: {
        int count;
        if (b->motor == RB_MOTOR_RUNNING) {
            refuse(c, S("state"), S("motor running"));
            return;
        }
        count = rb_nv_load_image(b, 1);
        rb_ln_kv_u32(c->reply, S("count"), count < 0 ? 0u : (uint32_t)count);
        break;
    }
    case V_ARM:
        if (b->motor == RB_MOTOR_RUNNING) {
            refuse(c, S("state"), S("motor running"));
            return;
        }
        n = rb_interlock(b, why, sizeof why);
        if (n > 0) {
            refuse(c, S("interlock"), NULL);
            say_ram(c, why, n);
            return;
        }
        rb_happen(b, RB_H_ARM);
        rb_ln_kv(c->reply, S("motor"), rb_motor_word(b));
        break;
    case V_DISARM:
        rb_happen(b, RB_H_DISARM);
        rb_ln_kv(c->reply, S("motor"), rb_motor_word(b));
        break;
    case V_CLEAR: {
        int was_tripped = b->motor == RB_MOTOR_TRIPPED;
        rb_happen(b, RB_H_CLEAR);                  /* §7.3: never starts the motor */
        if (was_tripped) {
            b->has_fault = 0;
            memcpy(b->fault, "none", 5);
            rb_event(b, rb_ev_start(b, S("clear")));
        }
        rb_ln_kv(c->reply, S("motor"), rb_motor_word(b));
        break;
    }
    case V_KILL:
        rb_trip_rom(b, S("kill"), 0, 0);
        rb_ln_kv(c->reply, S("motor"), rb_motor_word(b));
        break;
    default:                                        /* status */
        rb_status_fields(b, c->reply);
        break;
    }
}

/* ------------------------------------------------------------------ dispatch */

static int all_digits_seq(rb_ctx *c, uint16_t *seq)
{
    /* firmware.py _answer_bad: tokens[1] all digits with a value below 65536 */
    size_t i;
    uint32_t v = 0;
    if (c->nt < 2 || TOKN(c, 1) == 0)
        return 0;
    for (i = 0; i < TOKN(c, 1); i++) {
        char ch = TOKP(c, 1)[i];
        if (ch < '0' || ch > '9')
            return 0;
        if (v < 65536u)
            v = v * 10u + (uint32_t)(ch - '0');
    }
    if (v >= 65536u)
        return 0;
    *seq = (uint16_t)v;
    return 1;
}

static void send_err(rb_ctx *c, uint16_t seq, rb_line *out)
{
    size_t n = clean_text(c);
    rb_ln_open(out, S("err"));
    rb_ln_u32(out, seq);
    rb_ln_word(out, c->err);
    if (n > 0) {
        rb_ln_raw(out, " ", 1);
        rb_ln_raw(out, c->text, n);
    }
}

/* A body that passed the CRC but is not a legal command: counted; answered when its
 * sequence number could be read (§3), with `reply` (bad_args or unknown_verb) and the text
 * said so far. The answer is not kept for a resend, so it is built in out_event. */
static void bad(rb_ctx *c, const char *rom_code, const char *rom_reply)
{
    uint16_t seq;
    c->b->rx_err++;
    c->b->last_rx_error = rom_code;
    if (c->nt > 0 && rb_token_is(c->body, &c->t[0], S("kill")))
        rb_trip_rom(c->b, S("kill"), 0, 0);      /* §7.1: a kill that fails to parse stops */
    if (rom_reply != NULL && all_digits_seq(c, &seq)) {
        c->err = rom_reply;
        send_err(c, seq, &c->b->out_event);
        rb_tx_put(c->b, &c->b->out_event, RB_TX_REPLY);
    }
}

/* check the grammar of each verb (messages.py COMMANDS); 0 when refused (bad() done) */
static int grammar(rb_ctx *c, int verb, uint32_t *index, int *kind, rb_real *rate)
{
    int i;
    if (verb >= V_SAVE) {
        if (c->nt != 2) {
            refuse(c, NULL, S("takes no arguments"));
            bad(c, S("bad_field"), S("bad_args"));
            return 0;
        }
    } else if (verb == V_HELLO) {
        const char *v = c->nt == 3 ? TOKP(c, 2) : "";
        size_t vn = c->nt == 3 ? TOKN(c, 2) : 0, dot = 0, k;
        int ok = c->nt == 3;
        for (k = 0; ok && k < vn; k++) {
            if (v[k] == '.') {
                if (dot)
                    ok = 0;
                dot = k;
            } else if (v[k] < '0' || v[k] > '9') {
                ok = 0;
            }
        }
        if (!ok || dot == 0 || dot > 3 || vn - dot - 1 < 1 || vn - dot - 1 > 3) {
            refuse(c, NULL, S("hello takes a version major.minor"));
            bad(c, S("bad_field"), S("bad_args"));
            return 0;
        }
    } else if (verb == V_PARAM || verb == V_SIGNAL || verb == V_LOOP) {
        if (c->nt != 3) {
            refuse(c, NULL, S("takes one index"));
            bad(c, S("bad_field"), S("bad_args"));
            return 0;
        }
        if (!rb_parse_uint(TOKP(c, 2), TOKN(c, 2), 256u, index)) {
            refuse(c, NULL, S("index "));
            say_ram(c, TOKP(c, 2), TOKN(c, 2));
            say(c, S(" is not an integer below 256"));
            bad(c, S("bad_number"), S("bad_args"));
            return 0;
        }
    } else if (verb == V_GET) {
        int ok = c->nt >= 3;
        for (i = 2; ok && i < c->nt; i++)
            ok = rb_is_name(TOKP(c, i), TOKN(c, i));
        if (!ok) {
            refuse(c, NULL, S("get takes one or more names"));
            bad(c, S("bad_field"), S("bad_args"));
            return 0;
        }
    } else if (verb == V_SET || verb == V_STAGE) {
        if (c->nt < 3 || !fields_ok(c, 2)) {
            refuse(c, NULL, S("set takes name=value pairs"));
            bad(c, S("bad_field"), S("bad_args"));
            return 0;
        }
        for (i = 2; i < c->nt; i++) {
            size_t k = key_len(c, i);
            rb_real v;
            if (!rb_parse_real(TOKP(c, i) + k + 1, TOKN(c, i) - k - 1, &v)) {
                refuse(c, NULL, NULL);
                say_ram(c, TOKP(c, i), k);
                say(c, S(" "));
                say_ram(c, TOKP(c, i) + k + 1, TOKN(c, i) - k - 1);
                say(c, S(" is not a number"));
                bad(c, S("bad_number"), S("bad_args"));
                return 0;
            }
        }
    } else if (verb == V_MODE) {
        *kind = c->nt >= 3 ? rb_rom_find(S(MODE_WORDS), TOKP(c, 2), TOKN(c, 2)) : -1;
        if (*kind < 0 || !fields_ok(c, 3)) {
            refuse(c, NULL, *kind < 0 ? S("mode must be one of off, hold, relay, open, inject")
                                      : S("mode fields are name=value"));
            bad(c, S("bad_field"), S("bad_args"));
            return 0;
        }
    } else {                                     /* stream */
        const char *v;
        size_t vn;
        if (c->nt != 3 || !fields_ok(c, 2) || !field(c, 2, S("rate_hz"), &v, &vn)) {
            refuse(c, NULL, S("stream takes rate_hz=<number>"));
            bad(c, S("bad_field"), S("bad_args"));
            return 0;
        }
        if (!rb_parse_real(v, vn, rate)) {
            refuse(c, NULL, S("rate_hz "));
            say_ram(c, v, vn);
            say(c, S(" is not a number"));
            bad(c, S("bad_number"), S("bad_args"));
            return 0;
        }
    }
    return 1;
}

static int same_as_last(const rb_board *b, uint16_t seq, const char *body, size_t n)
{
    if (!b->has_last || b->last_seq != seq || b->last_body_len != n)
        return 0;
#if RB_KEEP_LAST_BODY
    return memcmp(b->last_body, body, n) == 0;
#else
    return b->last_body_crc == rb_crc16((const uint8_t *)body, n);
#endif
}

void rb_command(rb_board *b, const char *body, size_t n)
{
    rb_tok toks[RB_MAX_TOKENS];
    rb_real rate = 0;
    rb_ctx c;
    uint32_t seq, index = 0;
    int kind = 0, verb;
    c.reply = &b->out_reply;
    c.b = b;
    c.body = body;
    c.t = toks;
    c.err = NULL;
    c.tn = 0;
    c.nt = rb_split(body, n, toks, RB_MAX_TOKENS);
    if (c.nt <= 0)
        return;                                  /* cannot happen for a body <= 193 bytes */
    if (rb_token_is(body, &toks[0], S("hb"))) {
        if (c.nt != 1) {
            bad(&c, S("bad_field"), NULL);
            return;
        }
        b->hb_us = b->port.micros(b->port.ctx);  /* §7.2 */
        b->hb_seen = 1;
        return;
    }
    verb = rb_rom_find(S(VERB_WORDS), body, toks[0].n);
    if (verb < 0) {
        if (rb_rom_find(S(BOARD_VERB_WORDS), body, toks[0].n) >= 0) {
            bad(&c, S("wrong_direction"), NULL);
            return;
        }
        refuse(&c, NULL, S("unknown verb "));
        say_ram(&c, body, toks[0].n < 16 ? toks[0].n : 16);
        bad(&c, S("unknown_verb"), S("unknown_verb"));
        return;
    }
    if (c.nt < 2) {
        bad(&c, S("bad_field"), NULL);
        return;
    }
    if (!rb_parse_uint(TOKP(&c, 1), TOKN(&c, 1), 65536u, &seq)) {
        refuse(&c, NULL, S("sequence number "));
        say_ram(&c, TOKP(&c, 1), TOKN(&c, 1));
        say(&c, S(" is not an integer below 65536"));
        bad(&c, S("bad_number"), S("bad_args"));
        return;
    }
    c.seq = (uint16_t)seq;
    if (!grammar(&c, verb, &index, &kind, &rate))
        return;
    /* §4.2: the same sequence number and the same body as the last command answered: the
     * stored reply, already a frame, goes out again */
    if (verb != V_HELLO && same_as_last(b, c.seq, body, n)) {   /* a hello is never a resend */
        rb_tx_put_frame(b, b->last_line, b->last_line_len, RB_TX_REPLY);
        return;
    }
    b->has_last = 0;          /* its reply is overwritten now (a trip must not rewrite it) */
    if (verb != V_SET && verb != V_STAGE)
        b->n_staged = 0;                         /* §5.5: any other command drops a group */
    c.err = NULL;
    rb_ln_open(c.reply, S("ok"));
    rb_ln_u32(c.reply, c.seq);
    switch (verb) {
    case V_HELLO: on_hello(&c); break;
    case V_PARAM: case V_SIGNAL: case V_LOOP: on_describe(&c, index, verb); break;
    case V_GET: on_get(&c); break;
    case V_SET: on_set(&c); break;
    case V_STAGE: on_stage(&c); break;
    case V_MODE: on_mode(&c, kind); break;
    case V_STREAM: on_stream(&c, rate); break;
    default: on_simple(&c, verb); break;
    }
    if (c.err == NULL && c.reply->overflow)
        refuse(&c, S("bad_args"), S("reply would not fit in one line; ask for fewer"));
    if (c.err != NULL)
        send_err(&c, c.seq, c.reply);
#if RB_KEEP_LAST_BODY
    memcpy(b->last_body, body, n);
#else
    b->last_body_crc = rb_crc16((const uint8_t *)body, n);
#endif
    b->last_body_len = (uint8_t)n;
    b->last_seq = c.seq;
    b->has_last = verb != V_HELLO;   /* §4.2: a hello clears the resend memory */
    b->last_line_len = (uint8_t)rb_frame((char *)b->last_line, sizeof b->last_line,
                                         c.reply->s, c.reply->n);
    rb_tx_put_frame(b, b->last_line, b->last_line_len, RB_TX_REPLY);
}
