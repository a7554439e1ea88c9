/*
 * hive_scale_by_hand.c - the hive_scale pipeline written by hand for a Cortex-M, the
 * yardstick of benchmarks/firmware_figures.py.
 *
 * The same arithmetic as the DEVELOPERS.md contract (and bit-exact with the generated
 * steps, which the figures script checks on every run): offset, a 5-sample moving average,
 * one Butterworth biquad with error feedback, scale and temperature compensation. Written
 * as one would for this one product: constants typed in, a ring buffer and a running sum
 * for the average, every product 32 x 32 -> 64 where the operands allow, the rounding
 * constant of the biquad carried in its error state, no saturation that the ranges of this
 * design cannot reach. It stands in for ht_pipeline.c (same public functions), so
 * ht_runner.c and ht_calblock.c link against it unchanged; its filter state lives in one
 * static struct, as a single-channel product would keep it.
 *
 * Build (the figures script does): ht_runner.c hive_scale_by_hand.c ht_calblock.c
 * ht_crc32.c with -DHT_DESIGN_HEADER='"hive_scale_design.h"' -DHT_DESIGN_PREFIX=HIVE_SCALE.
 */
#include "ht_pipeline.h"

/* Storage class of the blocks (noinline to measure each block's size apart). */
#ifndef HW_BLOCK
#define HW_BLOCK static inline
#endif

/* Keeps gcc from expanding a 64-bit product by a constant into shifts and adds. */
#if defined(__GNUC__)
#define HW_OPAQUE(x) __asm__("" : "+r"(x))
#else
#define HW_OPAQUE(x) ((void)0)
#endif

/* Moving-average tap 0x33333333; the centre tap is one LSB more. */
#define HW_MA_TAP 0x33333333u
/* Butterworth section, Q30, with a1 and a2 negated. */
#define HW_B0 21564350
#define HW_B1 43128698
#define HW_B2 21564350
#define HW_NA1 1676130396
#define HW_NA2 (-688645970)

static struct {
    int32_t ring[5];   /* last five chain words; head is the oldest */
    uint32_t head;
    int64_t sum;       /* sum of ring[] */
    int32_t x1, x2, y1, y2;
    uint32_t err;      /* biquad error feedback + 2^29, in [0, 2^30) */
} hw;

HW_BLOCK int32_t hw_offset(int32_t code, int32_t offset)
{
    return code * 64 - offset;   /* |code| < 2^23, |offset| <= 2^29: fits */
}

HW_BLOCK int32_t hw_average(int32_t x)
{
    uint32_t h = hw.head;
    uint32_t tap = HW_MA_TAP;
    int32_t centre;
    int64_t acc;

    hw.sum += x - hw.ring[h];
    hw.ring[h] = x;
    centre = hw.ring[h >= 2u ? h - 2u : h + 3u];   /* x[n-2] */
    hw.head = h == 4u ? 0u : h + 1u;
    HW_OPAQUE(tap);
    acc = hw.sum * tap + centre + INT64_C(0x80000000);
    return (int32_t)(acc >> 32);
}

HW_BLOCK int32_t hw_biquad(int32_t x)
{
    int64_t acc = hw.err;
    int32_t y;

    acc += (int64_t)HW_B0 * x;
    acc += (int64_t)HW_B1 * hw.x1;
    acc += (int64_t)HW_B2 * hw.x2;
    acc += (int64_t)HW_NA1 * hw.y1;
    acc += (int64_t)HW_NA2 * hw.y2;
    y = (int32_t)(acc >> 30);
    hw.err = (uint32_t)acc & 0x3FFFFFFFu;
    hw.x2 = hw.x1;
    hw.x1 = x;
    hw.y2 = hw.y1;
    hw.y1 = y;
    return y;
}

HW_BLOCK int32_t hw_scale(int32_t v, int32_t m)
{
    return (int32_t)(((int64_t)v * m + (INT64_C(1) << 42)) >> 43);
}

HW_BLOCK int32_t hw_temperature(int32_t s, int32_t t, int32_t kz, int32_t ks)
{
    int32_t dt, s1, g;

    t = t < -2000 ? -2000 : (t > 4500 ? 4500 : t);
    dt = t - 2000;
    s1 = s - (int32_t)(((int64_t)kz * dt + (INT64_C(1) << 35)) >> 36);
    g = (int32_t)(((int64_t)ks * dt + (INT64_C(1) << 19)) >> 20);
    HW_OPAQUE(g);
    return s1 + (int32_t)(((int64_t)s1 * g + (INT64_C(1) << 29)) >> 30);
}

void ht_constants_default(ht_constants_t *c)
{
    c->offset = HIVE_SCALE_OFFSET_DEFAULT;
    c->scale_mul = HIVE_SCALE_SCALE_MUL_DEFAULT;
    c->lin[0] = 0;
    c->tc_zero = HIVE_SCALE_TC_ZERO_DEFAULT;
    c->tc_span = HIVE_SCALE_TC_SPAN_DEFAULT;
}

void ht_pipeline_reset(ht_pipeline_t *p)
{
    uint32_t k;

    for (k = 0u; k < 5u; ++k) {
        hw.ring[k] = 0;
    }
    hw.head = 0u;
    hw.sum = 0;
    hw.x1 = hw.x2 = hw.y1 = hw.y2 = 0;
    hw.err = 1u << 29;
    p->pending = 0u;
}

void ht_pipeline_init(ht_pipeline_t *p)
{
    ht_constants_default(&p->constants);
    p->calibrated = false;
    ht_pipeline_reset(p);
}

int32_t ht_settled_output(const ht_pipeline_t *p, int32_t code, int32_t temp_centi)
{
    code = code > 8388607 ? 8388607 : (code < -8388608 ? -8388608 : code);
    return hw_temperature(hw_scale(hw_offset(code, p->constants.offset), p->constants.scale_mul),
                          temp_centi, p->constants.tc_zero, p->constants.tc_span);
}

ht_status_t ht_process(ht_pipeline_t *p, int32_t code, int32_t temp_centi, int32_t *out)
{
    ht_status_t status = HT_STATUS_READY;
    int32_t v;

    if (code >= 8388607) {
        code = 8388607;
        status |= HT_STATUS_INPUT_RAIL;
    } else if (code <= -8388608) {
        code = -8388608;
        status |= HT_STATUS_INPUT_RAIL;
    }
    v = hw_offset(code, p->constants.offset);
    v = hw_average(v);
    v = hw_biquad(v);
    v = hw_scale(v, p->constants.scale_mul);
    *out = hw_temperature(v, temp_centi, p->constants.tc_zero, p->constants.tc_span);
    if (!p->calibrated) {
        status |= HT_STATUS_UNCALIBRATED;
    }
    return status;
}
