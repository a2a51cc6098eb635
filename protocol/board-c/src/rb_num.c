/*
 * rb_num.c -- numbers as text (PROTOCOL.md §3) without the C library's printf and strtod,
 * and without floating-point arithmetic: a value's bits are taken apart and rounded with
 * integers only, so a core without an FPU needs no soft-float routines for number text.
 *
 * Writing: "%.*g" with 1..7 significant digits, correctly rounded (ties to even, on the
 * exact binary value), then the exponent without '+' and leading zeros ("1e-07" -> "1e-7")
 * and "-0" -> "0": the text bench/rigbench/wire/messages.py format_number writes, for every finite
 * value including subnormals.
 * Reading: the grammar -?D+(.D+)?([eE][-+]?D+)?, correctly rounded to the nearest value of
 * the target format (ties to even), as Python's float() reads it; a value too large for the
 * format is refused (Python gives inf there, which the codec refuses), one too small reads
 * as zero.
 *
 * How: v = m * 2^e exactly. To write P digits, T = floor(v * 10^k) is computed exactly with
 * an unsigned big integer of a few dozen limbs (multiply by powers of ten, shift by powers of
 * two, divide by powers of ten; a "sticky" flag keeps whether anything non-zero was cut off),
 * with k chosen from floor(log2 v) so that T has P+1 or P+2 digits: the last digit and the
 * sticky flag then decide the rounding exactly. Reading is the same in reverse: the decimal
 * digits as a big integer W, W * 10^q scaled by a power of two to a little more than the
 * format's mantissa, then rounded to it. A typical telemetry value takes one multiply pass
 * and one shift over two or three limbs.
 *
 * Assumes IEEE 754 binary32/binary64 for float and double (checked below); limbs are 32 bits
 * where int has 32 bits, 16 bits on 8/16-bit cores (no 64-bit arithmetic there).
 *
 * -DRB_NUM_LIBC=1 builds the former snprintf("%.*g") / strtod version instead, kept only so
 * that scripts/footprint_c.py can measure the two side by side.
 */
#include "rb_internal.h"

#include <float.h>
#include <limits.h>
#include <string.h>

#if FLT_RADIX != 2 || FLT_MANT_DIG != 24 || FLT_MAX_EXP != 128
#error "rb_num.c needs IEEE 754 binary32 floats"
#endif
#if DBL_MANT_DIG == 53 && DBL_MAX_EXP == 1024
#define RB_DOUBLE64 1
#elif DBL_MANT_DIG == 24 && DBL_MAX_EXP == 128
#define RB_DOUBLE64 0                 /* double is binary32 (8-bit cores) */
#else
#error "rb_num.c needs IEEE 754 binary64 or binary32 doubles"
#endif

#define REAL_IS_FLOAT (sizeof(rb_real) == sizeof(float))

#if RB_NUM_LIBC
/* ------------------------------------------------------------------ the former version */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>

size_t rb_format_number(char *out, size_t cap, double value, int digits)
{
    char tmp[40];
    char *e;
    int n;
    size_t len;
    if (!isfinite(value) || digits < 1 || digits > RB_MAX_DIGITS)
        return 0;
    n = snprintf(tmp, sizeof tmp, "%.*g", digits, value);
    if (n <= 0 || (size_t)n >= sizeof tmp)
        return 0;
    e = strchr(tmp, 'e');
    if (e != NULL) {
        char *src = e + 1, *dst = e + 1;
        if (*src == '+')
            src++;
        else if (*src == '-')
            *dst++ = *src++;
        while (*src == '0' && src[1] != '\0')
            src++;
        while (*src)
            *dst++ = *src++;
        *dst = '\0';
    }
    if (strcmp(tmp, "-0") == 0)
        strcpy(tmp, "0");
    len = strlen(tmp);
    if (len + 1 > cap)
        return 0;
    memcpy(out, tmp, len + 1);
    return len;
}

int rb_parse_number(const char *tok, size_t n, double *out)
{
    char tmp[64];
    double v;
    if (n == 0 || n >= sizeof tmp || !rb_number_grammar(tok, n))
        return 0;
    memcpy(tmp, tok, n);
    tmp[n] = '\0';
    v = strtod(tmp, NULL);
    if (!isfinite(v))
        return 0;
    *out = v;
    return 1;
}

size_t rb_format_real(char *out, size_t cap, rb_real value, int digits)
{
    return rb_format_number(out, cap, (double)value, digits);
}

int rb_parse_real(const char *tok, size_t n, rb_real *out)
{
    double v;
    if (!rb_parse_number(tok, n, &v))
        return 0;
    if (REAL_IS_FLOAT && !(v <= FLT_MAX && v >= -FLT_MAX))
        return 0;
    *out = (rb_real)v;
    return 1;
}

#else
/* ------------------------------------------------------------------ big integers */

#if UINT_MAX > 0xFFFFu
typedef uint32_t limb;
typedef uint64_t wide;
#define LIMB_BITS 32
#define CHUNK 1000000000u             /* the largest power of ten in a limb */
#define CHUNK_DIGITS 9
#else
typedef uint16_t limb;
typedef uint32_t wide;
#define LIMB_BITS 16
#define CHUNK 10000u
#define CHUNK_DIGITS 4
#endif

/* Largest value held: reading a binary64 below 1e-308 with 63 digits scales W * 2^j to
 * about 2^1350 before dividing by 10^|q|; writing one multiplies m < 2^53 by up to 10^331
 * (< 2^1153). binary32 needs at most about 400 bits. */
#if RB_DOUBLE64
#define BIG_BITS 1408
#else
#define BIG_BITS 416
#endif
#define BIG_LIMBS (BIG_BITS / LIMB_BITS)

typedef struct {
    limb d[BIG_LIMBS];                /* little-endian; d[n-1] != 0 unless n == 0 */
    int n;
} big;

static const uint32_t POW10[10] = {1u, 10u, 100u, 1000u, 10000u, 100000u, 1000000u,
                                   10000000u, 100000000u, 1000000000u};

static void big_mul_small(big *b, limb f)
{
    wide carry = 0;
    int i;
    for (i = 0; i < b->n; i++) {
        wide t = (wide)b->d[i] * f + carry;
        b->d[i] = (limb)t;
        carry = t >> LIMB_BITS;
    }
    if (carry)
        b->d[b->n++] = (limb)carry;
}

static void big_add_small(big *b, limb a)
{
    int i;
    for (i = 0; a && i < b->n; i++) {
        limb s = (limb)(b->d[i] + a);
        a = s < a;
        b->d[i] = s;
    }
    if (a)
        b->d[b->n++] = a;
}

static void big_mul_pow10(big *b, int k)
{
    for (; k >= CHUNK_DIGITS; k -= CHUNK_DIGITS)
        big_mul_small(b, (limb)CHUNK);
    if (k > 0)
        big_mul_small(b, (limb)POW10[k]);
}

static void big_shl(big *b, int s)
{
    int w = s / LIMB_BITS, r = s % LIMB_BITS, i;
    if (b->n == 0)
        return;
    if (r) {
        limb top = (limb)(b->d[b->n - 1] >> (LIMB_BITS - r));
        for (i = b->n - 1; i > 0; i--)
            b->d[i] = (limb)((b->d[i] << r) | (b->d[i - 1] >> (LIMB_BITS - r)));
        b->d[0] = (limb)(b->d[0] << r);
        if (top)
            b->d[b->n++] = top;
    }
    if (w) {
        memmove(b->d + w, b->d, (size_t)b->n * sizeof(limb));
        memset(b->d, 0, (size_t)w * sizeof(limb));
        b->n += w;
    }
}

/* b >>= s; returns 1 when a non-zero bit was shifted out */
static int big_shr(big *b, int s)
{
    int w = s / LIMB_BITS, r = s % LIMB_BITS, i, lost = 0;
    if (w >= b->n) {
        lost = b->n > 0;
        b->n = 0;
        return lost;
    }
    for (i = 0; i < w; i++)
        lost |= b->d[i] != 0;
    if (w) {
        memmove(b->d, b->d + w, (size_t)(b->n - w) * sizeof(limb));
        b->n -= w;
    }
    if (r) {
        lost |= (limb)(b->d[0] << (LIMB_BITS - r)) != 0;
        for (i = 0; i < b->n - 1; i++)
            b->d[i] = (limb)((b->d[i] >> r) | (b->d[i + 1] << (LIMB_BITS - r)));
        b->d[b->n - 1] = (limb)(b->d[b->n - 1] >> r);
        if (b->d[b->n - 1] == 0)
            b->n--;
    }
    return lost;
}

/* b = floor(b / f); returns 1 when the remainder is not zero */
static int big_div_small(big *b, limb f)
{
    wide r = 0;
    int i;
    for (i = b->n - 1; i >= 0; i--) {
        wide t = (r << LIMB_BITS) | b->d[i];
        b->d[i] = (limb)(t / f);
        r = t % f;
    }
    while (b->n > 0 && b->d[b->n - 1] == 0)
        b->n--;
    return r != 0;
}

/* b = floor(b / 10^k), a chunk at a time (floor(floor(x/a)/b) == floor(x/(a*b))) */
static int big_div_pow10(big *b, int k)
{
    int lost = 0;
    for (; k >= CHUNK_DIGITS; k -= CHUNK_DIGITS)
        lost |= big_div_small(b, (limb)CHUNK);
    if (k > 0)
        lost |= big_div_small(b, (limb)POW10[k]);
    return lost;
}

static int bitlen32(uint32_t v)
{
    /* bits needed for v: a binary search, the same on every compiler */
    int n = 0;
    if (v >= 0x10000u) { v >>= 16; n += 16; }
    if (v >= 0x100u) { v >>= 8; n += 8; }
    if (v >= 0x10u) { v >>= 4; n += 4; }
    if (v >= 0x4u) { v >>= 2; n += 2; }
    if (v >= 0x2u) { v >>= 1; n += 1; }
    return n + (int)v;
}

static int big_bitlen(const big *b)
{
    return b->n == 0 ? 0 : (b->n - 1) * LIMB_BITS + bitlen32(b->d[b->n - 1]);
}

static uint32_t big_low32(const big *b)
{
#if LIMB_BITS == 32
    return b->n > 0 ? b->d[0] : 0u;
#else
    return (b->n > 0 ? b->d[0] : 0u) | (b->n > 1 ? (uint32_t)b->d[1] << 16 : 0u);
#endif
}

/* floor(L * log10(2)) for |L| <= 1200 (checked against exact powers for every such L) */
static int32_t floor_log10_pow2(int32_t L)
{
    return L >= 0 ? (L * 78913L) >> 18 : -((-L * 78913L + 262143L) >> 18);
}

/* ------------------------------------------------------------------ writing */

#if RB_DOUBLE64
typedef uint64_t mant;                /* a significand with its leading bit */
#else
typedef uint32_t mant;
#endif

#if LIMB_BITS == 32
static const char PAIRS[201] = "00010203040506070809101112131415161718192021222324252627282930313233343536373839404142434445464748495051525354555657585960616263646566676869707172737475767778798081828384858687888990919293949596979899";

/* The usual telemetry value (1e-19 < |v| < 1e8 or so) in 64-bit arithmetic:
 * floor(m * 10^k / 2^s) and whether anything non-zero was cut off, for m < 2^53,
 * 0 <= k <= 19, 1 <= s <= 127, when the result is known to be below 2^32. */
static uint32_t scale_fast(uint64_t m, int k, int s, int *sticky)
{
    static const uint64_t P10[20] = {
        1ull, 10ull, 100ull, 1000ull, 10000ull, 100000ull, 1000000ull, 10000000ull,
        100000000ull, 1000000000ull, 10000000000ull, 100000000000ull, 1000000000000ull,
        10000000000000ull, 100000000000000ull, 1000000000000000ull, 10000000000000000ull,
        100000000000000000ull, 1000000000000000000ull, 10000000000000000000ull};
    uint64_t p = P10[k], ml = m & 0xFFFFFFFFu, mh = m >> 32, pl = p & 0xFFFFFFFFu, ph = p >> 32;
    uint64_t ll = ml * pl, lh = ml * ph, hl = mh * pl, hh = mh * ph;
    uint64_t mid = (ll >> 32) + (lh & 0xFFFFFFFFu) + (hl & 0xFFFFFFFFu);
    uint64_t lo = (ll & 0xFFFFFFFFu) | (mid << 32);
    uint64_t hi = hh + (lh >> 32) + (hl >> 32) + (mid >> 32);   /* m * p = hi:lo */
    if (s >= 64) {
        s -= 64;
        *sticky = lo != 0 || (hi & ((1ull << s) - 1u)) != 0;
        return (uint32_t)(hi >> s);
    }
    *sticky = (lo & ((1ull << s) - 1u)) != 0;
    return (uint32_t)((lo >> s) | (hi << (64 - s)));
}
#endif

/* "%.*g" of (neg ? -1 : 1) * m * 2^e2, m > 0 with `bits` significant bits; see the file
 * comment */
static size_t format_mant(char *out, size_t cap, int neg, mant m, int bits, int e2,
                          int digits)
{
    char dig[8], tmp[RB_NUM_TEXT], *o = cap >= RB_NUM_TEXT ? out : tmp;
    int32_t X = floor_log10_pow2((int32_t)(e2 + bits - 1));
    int k = digits - (int)X, sticky = 0, nd, i, d;
    uint32_t T, N;
    size_t len = 0;
#if LIMB_BITS == 32
    if (k >= 0 && k <= 19 && e2 < 0 && e2 > -128) {
        T = scale_fast((uint64_t)m, k, -e2, &sticky);
    } else
#endif
    {
        big B;
        B.n = 0;
        while (m) {
            B.d[B.n++] = (limb)m;
            m = (m >> (LIMB_BITS / 2)) >> (LIMB_BITS / 2);   /* no shift by the full width */
        }
        if (k > 0)
            big_mul_pow10(&B, k);
        if (e2 > 0)
            big_shl(&B, e2);
        else if (e2 < 0)
            sticky = big_shr(&B, -e2);
        if (k < 0)
            sticky |= big_div_pow10(&B, -k);
        T = big_low32(&B);
    }
    /* 10^digits <= T < 10^(digits+2) */
    if (T >= POW10[digits + 1]) {         /* v >= 10^(X+1): one digit more than wanted */
        sticky |= T % 10u != 0;
        T /= 10u;
        X++;
    }
    N = T / 10u;
    d = (int)(T - N * 10u);
    if (d > 5 || (d == 5 && (sticky || (N & 1u))))
        N++;
    if (N == POW10[digits]) {             /* 9.9999995 -> 10.00000 */
        N /= 10u;
        X++;
    }
#if LIMB_BITS == 32
    {
        /* digits by fixed-point: y = N * ceil(2^52 / 10^(digits-1)) holds N / 10^(digits-1)
         * in 52 fraction bits, each digit is the integer part of 10 times the fraction. The
         * rounding-up error stays below 10^7 / 2^52 and, times 10^6 at the last digit,
         * below 0.003: never enough to reach the next digit (for digits <= 8). */
        static const uint64_t SCALE[7] = {4503599627370496ull, 450359962737050ull,
                                          45035996273705ull, 4503599627371ull,
                                          450359962738ull, 45035996274ull, 4503599628ull};
        uint64_t y = (uint64_t)N * SCALE[digits - 1];
        dig[0] = (char)('0' + (y >> 52));
        for (i = 1; i + 1 < digits; i += 2) {         /* two digits a step: error x 100 */
            y = (y & 0xFFFFFFFFFFFFFull) * 100u;
            memcpy(dig + i, PAIRS + 2 * (y >> 52), 2);
        }
        if (i < digits) {
            y = (y & 0xFFFFFFFFFFFFFull) * 10u;
            dig[i] = (char)('0' + (y >> 52));
        }
    }
#else
    for (i = digits - 1; i > 0; i--) {
        uint32_t q = N / 10u;
        dig[i] = (char)('0' + (N - q * 10u));
        N = q;
    }
    dig[0] = (char)('0' + N);
#endif
    for (nd = digits; nd > 1 && dig[nd - 1] == '0'; nd--) {
    }                                     /* %g drops trailing zeros */
    if (neg)
        o[len++] = '-';
    if (X < -4 || X >= digits) {          /* d.ddde-X */
        int32_t ax = X < 0 ? -X : X;
        o[len++] = dig[0];
        if (nd > 1) {
            o[len++] = '.';
            for (i = 1; i < nd; i++)
                o[len++] = dig[i];
        }
        o[len++] = 'e';
        if (X < 0)
            o[len++] = '-';
        if (ax >= 100)
            o[len++] = (char)('0' + ax / 100);
        if (ax >= 10)
            o[len++] = (char)('0' + ax / 10 % 10);
        o[len++] = (char)('0' + ax % 10);
    } else if (X >= 0) {                  /* ddd.ddd or ddd000 */
        int whole = (int)X + 1;
        for (i = 0; i < whole; i++)
            o[len++] = i < nd ? dig[i] : '0';
        if (nd > whole) {
            o[len++] = '.';
            for (i = whole; i < nd; i++)
                o[len++] = dig[i];
        }
    } else {                              /* 0.000ddd */
        o[len++] = '0';
        o[len++] = '.';
        for (i = 0; i < -1 - (int)X; i++)
            o[len++] = '0';
        for (i = 0; i < nd; i++)
            o[len++] = dig[i];
    }
    o[len] = '\0';                       /* len < RB_NUM_TEXT: "-1.234567e-308" */
    if (o == tmp) {
        if (len + 1 > cap)
            return 0;
        memcpy(out, tmp, len + 1);
    }
    return len;
}

static size_t format_zero(char *out, size_t cap)
{
    if (cap < 2)
        return 0;
    out[0] = '0';
    out[1] = '\0';
    return 1;
}

static size_t format_f32(char *out, size_t cap, uint32_t bits, int digits)
{
    uint32_t m = bits & 0x7FFFFFu;
    int ex = (int)((bits >> 23) & 0xFFu);
    if (ex == 0xFF || digits < 1 || digits > RB_MAX_DIGITS)
        return 0;                             /* inf or nan */
    if (ex == 0 && m == 0)
        return format_zero(out, cap);
    if (ex == 0)                              /* subnormal */
        return format_mant(out, cap, (int)(bits >> 31), m, bitlen32(m), -149, digits);
    return format_mant(out, cap, (int)(bits >> 31), m | 0x800000u, 24, ex - 150, digits);
}

#if RB_DOUBLE64
static size_t format_f64(char *out, size_t cap, uint64_t bits, int digits)
{
    uint64_t m = bits & 0xFFFFFFFFFFFFFull;
    int ex = (int)((bits >> 52) & 0x7FFu), n;
    if (ex == 0x7FF || digits < 1 || digits > RB_MAX_DIGITS)
        return 0;
    if (ex == 0 && m == 0)
        return format_zero(out, cap);
    if (ex != 0)
        return format_mant(out, cap, (int)(bits >> 63), m | (1ull << 52), 53, ex - 1075, digits);
    n = m >> 32 ? 32 + bitlen32((uint32_t)(m >> 32)) : bitlen32((uint32_t)m);
    return format_mant(out, cap, (int)(bits >> 63), m, n, -1074, digits);
}
#endif

size_t rb_format_number(char *out, size_t cap, double value, int digits)
{
#if RB_DOUBLE64
    uint64_t bits;
    memcpy(&bits, &value, sizeof bits);
    return format_f64(out, cap, bits, digits);
#else
    uint32_t bits;
    memcpy(&bits, &value, sizeof bits);
    return format_f32(out, cap, bits, digits);
#endif
}

size_t rb_format_real(char *out, size_t cap, rb_real value, int digits)
{
    if (REAL_IS_FLOAT) {
        uint32_t bits;
        memcpy(&bits, &value, sizeof bits);
        return format_f32(out, cap, bits, digits);
    } else {
#if RB_DOUBLE64
        /* the usual case of format_f64 here, one call less on the telemetry path */
        double d = (double)value;
        uint64_t bits;
        int ex;
        memcpy(&bits, &d, sizeof bits);
        ex = (int)((bits >> 52) & 0x7FFu);
        if (ex != 0 && ex != 0x7FF && digits >= 1 && digits <= RB_MAX_DIGITS)
            return format_mant(out, cap, (int)(bits >> 63), (bits & 0xFFFFFFFFFFFFFull) | (1ull << 52),
                               53, ex - 1075, digits);
#endif
        return rb_format_number(out, cap, (double)value, digits);
    }
}

/* ------------------------------------------------------------------ reading */

typedef struct {
    int mant_bits;          /* with the leading bit: 53, 24 */
    int emin, emax;         /* exponents of the smallest and largest normal: -1022, 1023 */
    int zero_below;         /* a number < 10^(zero_below+1) rounds to zero */
    int inf_from;           /* a number >= 10^inf_from is beyond the largest finite */
} binfmt;

static const binfmt F32 = {24, -126, 127, -47, 39};
#if RB_DOUBLE64
static const binfmt F64 = {53, -1022, 1023, -325, 309};
#endif

enum { P_BAD, P_VALUE, P_ZERO, P_RANGE };

/* The digits of a number the grammar accepted, rounded to the format: M * 2^F (M in a big
 * integer, below 2^mant_bits) */
static int parse_big(const char *s, size_t n, const binfmt *f, big *M, int *F)
{
    size_t i = 0;
    int32_t q = 0, ex = 0, mag;
    int digits = 0, chunk_n = 0, j = 0, sticky = 0, in_frac = 0, E, Fe, sh;
    uint32_t chunk = 0;
    if (s[i] == '-')
        i++;
    M->n = 0;
    for (; i < n && s[i] != 'e' && s[i] != 'E'; i++) {
        if (s[i] == '.') {
            in_frac = 1;
            continue;
        }
        q -= (int32_t)in_frac;                 /* value = W * 10^-(digits after the point) */
        if (s[i] == '0' && digits == 0)        /* a leading zero adds nothing to W */
            continue;
        chunk = chunk * 10u + (uint32_t)(s[i] - '0');
        digits++;
        if (++chunk_n == CHUNK_DIGITS) {
            big_mul_small(M, (limb)CHUNK);
            big_add_small(M, (limb)chunk);
            chunk = 0;
            chunk_n = 0;
        }
    }
    if (chunk_n > 0) {
        big_mul_small(M, (limb)POW10[chunk_n]);
        big_add_small(M, (limb)chunk);
    }
    if (i < n) {                               /* exponent, saturated far beyond any range */
        int eneg = 0;
        i++;
        if (s[i] == '+' || s[i] == '-')
            eneg = s[i++] == '-';
        for (; i < n; i++)
            if (ex < 100000)
                ex = ex * 10 + (s[i] - '0');
        q += eneg ? -ex : ex;
    }
    if (M->n == 0)
        return P_ZERO;
    mag = (int32_t)digits + q - 1;             /* 10^mag <= value < 10^(mag+1) */
    if (mag <= f->zero_below)
        return P_ZERO;
    if (mag >= f->inf_from)
        return P_RANGE;
    if (q >= 0) {
        big_mul_pow10(M, (int)q);
    } else {
        /* enough bits that the quotient keeps mant_bits + 2 of them: log2(10) < 108853/2^15 */
        j = f->mant_bits + 3 + (int)((-q * 108853L) >> 15) + 1 - big_bitlen(M);
        if (j < 0)
            j = 0;
        big_shl(M, j);
        sticky = big_div_pow10(M, (int)-q);
    }
    E = big_bitlen(M) - 1 - j;                 /* floor(log2(value)) */
    Fe = (E > f->emin ? E : f->emin) - (f->mant_bits - 1);
    sh = Fe + j;
    if (sh > 0) {
        int half;
        sticky |= big_shr(M, sh - 1);
        half = M->n > 0 && (M->d[0] & 1u);
        big_shr(M, 1);
        if (half && (sticky || (M->n > 0 && (M->d[0] & 1u)))) {
            big_add_small(M, 1);
            if (big_bitlen(M) > f->mant_bits) {   /* rounded up to the next power of two */
                big_shr(M, 1);
                Fe++;
            }
        }
    } else if (sh < 0) {
        big_shl(M, -sh);
    }
    if (M->n == 0)
        return P_ZERO;
    if (Fe + f->mant_bits - 1 > f->emax)
        return P_RANGE;
    *F = Fe;
    return P_VALUE;
}

static int parse_f32(const char *tok, size_t n, uint32_t *bits)
{
    big M;
    int F = 0, r;
    uint32_t m, sign;
    if (n == 0 || n >= RB_MAX_NUMBER || !rb_number_grammar(tok, n))
        return 0;
    sign = tok[0] == '-' ? 0x80000000u : 0u;
    r = parse_big(tok, n, &F32, &M, &F);
    if (r == P_RANGE)
        return 0;
    if (r == P_ZERO) {
        *bits = sign;
        return 1;
    }
    m = big_low32(&M);
    if (m >= 0x800000u)
        *bits = sign | ((uint32_t)(F + 150) << 23) | (m & 0x7FFFFFu);
    else
        *bits = sign | m;                       /* subnormal: F == -149 */
    return 1;
}

#if RB_DOUBLE64
static int parse_f64(const char *tok, size_t n, uint64_t *bits)
{
    big M;
    int F = 0, r;
    uint64_t m, sign;
    if (n == 0 || n >= RB_MAX_NUMBER || !rb_number_grammar(tok, n))
        return 0;
    sign = tok[0] == '-' ? 1ull << 63 : 0u;
    r = parse_big(tok, n, &F64, &M, &F);
    if (r == P_RANGE)
        return 0;
    if (r == P_ZERO) {
        *bits = sign;
        return 1;
    }
    for (m = 0, r = M.n - 1; r >= 0; r--)
        m = (m << LIMB_BITS) | M.d[r];
    if (m >= 1ull << 52)
        *bits = sign | ((uint64_t)(F + 1075) << 52) | (m & 0xFFFFFFFFFFFFFull);
    else
        *bits = sign | m;
    return 1;
}
#endif

int rb_parse_number(const char *tok, size_t n, double *out)
{
#if RB_DOUBLE64
    uint64_t bits;
    if (!parse_f64(tok, n, &bits))
        return 0;
#else
    uint32_t bits;
    if (!parse_f32(tok, n, &bits))
        return 0;
#endif
    memcpy(out, &bits, sizeof *out);
    return 1;
}

int rb_parse_real(const char *tok, size_t n, rb_real *out)
{
    if (REAL_IS_FLOAT) {
        uint32_t bits;
        if (!parse_f32(tok, n, &bits))
            return 0;
        memcpy(out, &bits, sizeof bits);
        return 1;
    } else {
        double v;
        if (!rb_parse_number(tok, n, &v))
            return 0;
        *out = (rb_real)v;
        return 1;
    }
}

#endif /* RB_NUM_LIBC */

/* ------------------------------------------------------------------ both versions */

static int is_digit(char c) { return c >= '0' && c <= '9'; }

int rb_number_grammar(const char *tok, size_t n)
{
    /* -?D+(.D+)?([eE][-+]?D+)?  no nan, inf, leading '+' or '.' */
    size_t i = 0;
    if (n > 0 && tok[0] == '-')
        i++;
    if (i >= n || !is_digit(tok[i]))
        return 0;
    while (i < n && is_digit(tok[i]))
        i++;
    if (i < n && tok[i] == '.') {
        i++;
        if (i >= n || !is_digit(tok[i]))
            return 0;
        while (i < n && is_digit(tok[i]))
            i++;
    }
    if (i < n && (tok[i] == 'e' || tok[i] == 'E')) {
        i++;
        if (i < n && (tok[i] == '+' || tok[i] == '-'))
            i++;
        if (i >= n || !is_digit(tok[i]))
            return 0;
        while (i < n && is_digit(tok[i]))
            i++;
    }
    return i == n;
}

rb_real rb_round_real(rb_real v)
{
    /* the value as the board stores and reports it: 7 significant digits */
    char tmp[RB_MAX_NUMBER];
    rb_real r;
    size_t n = rb_format_real(tmp, sizeof tmp, v, 7);
    return n && rb_parse_real(tmp, n, &r) ? r : v;
}
