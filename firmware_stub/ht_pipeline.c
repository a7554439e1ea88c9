/*
 * ht_pipeline.c - the per-sample integer pipeline. See ht_pipeline.h and the arithmetic
 * contract in DEVELOPERS.md; hosttool.model.run_integer is the same arithmetic in Python
 * and the tests require both to agree bit for bit.
 *
 * Every product and accumulator is int64; the design proves that none overflows for codes
 * in the ADC range and constants within the limits the calibration loader enforces.
 * Narrowing to int32 is always an explicit saturation.
 */
#include "ht_pipeline.h"

#include <stddef.h>

/*
 * Compile-time checks (C99 has no static assertion: an array of negative size is a
 * compile error). Rounding shifts rely on >> of a negative value being arithmetic
 * (floor), which C leaves to the implementation.
 */
typedef char ht_check_arithmetic_shift[((-1 >> 1) == -1) ? 1 : -1];
typedef char ht_check_arithmetic_shift64[((-INT64_C(1) >> 1) == -INT64_C(1)) ? 1 : -1];

/* Fraction bits of the linearisation variable and coefficients, and of the span gain. */
#define HT_LIN_FRAC 30u
#if HT_D(HAS_LINEARISATION) && HT_D(LIN_FRAC) != 30
#error "the design's linearisation format is not the Q30 this firmware computes in"
#endif

/* x clamped to the int32 range by comparison, then narrowed. */
static inline int32_t ht_sat32(int64_t x)
{
    if (x > INT32_MAX) {
        return INT32_MAX;
    }
    if (x < INT32_MIN) {
        return INT32_MIN;
    }
    return (int32_t)x;
}

/* (x + 2^(k-1)) >> k, rounding half up; the identity for k = 0 (0 <= k <= 62). */
static inline int64_t ht_round_shift(int64_t x, unsigned k)
{
    if (k == 0u) {
        return x;
    }
    return (x + (INT64_C(1) << (k - 1u))) >> k;
}

/* 2^k as int64 (0 <= k <= 62): a shift to the left as an exact product. */
static inline int64_t ht_pow2(unsigned k)
{
    return INT64_C(1) << k;
}

/*
 * One input into an FIR stage; true when this input completes an output (every
 * decimation-th input), which then replaces *v.
 */
static inline bool ht_fir_step(int32_t *line, uint32_t *pos, uint32_t *phase,
                               const int32_t *taps, uint32_t length, unsigned frac,
                               uint32_t decimation, int32_t *v)
{
    uint32_t at = (*pos == 0u) ? length - 1u : *pos - 1u;
    const int32_t *x = &line[at];
    int64_t acc = 0;
    uint32_t k;

    line[at] = *v;
    line[at + length] = *v;
    *pos = at;
    *phase += 1u;
    if (*phase < decimation) {
        return false;
    }
    *phase = 0u;
    for (k = 0u; k < length; ++k) {
        acc += (int64_t)taps[k] * x[k];
    }
    *v = ht_sat32(ht_round_shift(acc, frac));
    return true;
}

/* One input through one biquad section (direct form I, first-order error feedback). */
static inline int32_t ht_biquad_step(int32_t *x1, int32_t *x2, int32_t *y1, int32_t *y2,
                                     int64_t *e, int32_t b0, int32_t b1, int32_t b2,
                                     int32_t a1, int32_t a2, unsigned q, int32_t x)
{
    int64_t acc = (int64_t)b0 * x + (int64_t)b1 * *x1 + (int64_t)b2 * *x2
                  - (int64_t)a1 * *y1 - (int64_t)a2 * *y2 + *e;
    int32_t y = ht_sat32(ht_round_shift(acc, q));

    *e = acc - (int64_t)y * ht_pow2(q);
    *x2 = *x1;
    *x1 = x;
    *y2 = *y1;
    *y1 = y;
    return y;
}

/* sat32(x), and *clamped set when the value had to be clamped. */
static inline int32_t ht_sat32_flag(int64_t x, bool *clamped)
{
    int32_t y = ht_sat32(x);

    *clamped = *clamped || y != x;
    return y;
}

/*
 * Steps 3 to 5 on one filtered chain word v: scale, linearisation, temperature; *clamped
 * is set when one of their saturations changed a value.
 */
static int32_t ht_static_path(const ht_constants_t *c, int32_t v, int32_t temp_centi,
                              bool *clamped)
{
    int32_t s = ht_sat32_flag(ht_round_shift((int64_t)v * c->scale_mul,
                                             (unsigned)HT_D(SCALE_SHIFT)), clamped);
#if HT_D(HAS_LINEARISATION)
    {
        const unsigned k_norm = HT_LIN_FRAC - (unsigned)HT_D(LIN_NORM_SHIFT);
        int64_t w = (int64_t)s * ht_pow2(k_norm);
        int64_t acc = c->lin[HT_D(LIN_COUNT) - 1];
        int i;

        for (i = HT_D(LIN_COUNT) - 2; i >= 0; --i) {
            acc = ht_round_shift(acc * w, HT_LIN_FRAC) + c->lin[i];
        }
        s = ht_sat32_flag(ht_round_shift(acc, k_norm), clamped);
    }
#endif
#if HT_D(HAS_TEMPERATURE)
    {
        int32_t t = temp_centi;
        int64_t dt, z, s1, g;

        if (t < HT_D(TEMP_LOW_CENTI)) {
            t = HT_D(TEMP_LOW_CENTI);
        } else if (t > HT_D(TEMP_HIGH_CENTI)) {
            t = HT_D(TEMP_HIGH_CENTI);
        }
        dt = (int64_t)t - HT_D(TEMP_REF_CENTI);
        z = ht_round_shift((int64_t)c->tc_zero * dt, (unsigned)HT_D(TC_ZERO_SHIFT));
        s1 = (int64_t)s - z;
        g = ht_round_shift((int64_t)c->tc_span * dt, (unsigned)HT_D(TC_SPAN_SHIFT));
        s = ht_sat32_flag(s1 + ht_round_shift(s1 * g, HT_LIN_FRAC), clamped);
    }
#else
    (void)temp_centi;
#endif
    return s;
}

void ht_constants_default(ht_constants_t *c)
{
    size_t i;

    c->offset = HT_D(OFFSET_DEFAULT);
    c->scale_mul = HT_D(SCALE_MUL_DEFAULT);
    for (i = 0u; i < (size_t)HT_LIN_SLOTS; ++i) {
        c->lin[i] = 0;
    }
#if HT_D(HAS_LINEARISATION)
    for (i = 0u; i < (size_t)HT_D(LIN_COUNT); ++i) {
        c->lin[i] = HT_D(LIN_DEFAULT)[i];
    }
#endif
#if HT_D(HAS_TEMPERATURE)
    c->tc_zero = HT_D(TC_ZERO_DEFAULT);
    c->tc_span = HT_D(TC_SPAN_DEFAULT);
#else
    c->tc_zero = 0;
    c->tc_span = 0;
#endif
}

/* Zeroing a stage's state, for each stage of the cascade. */
#define HT_FIR_RESET(stage, taps, length, frac, decimation)            \
    {                                                                  \
        uint32_t k_;                                                   \
        for (k_ = 0u; k_ < 2u * (uint32_t)(length); ++k_) {            \
            p->fir##stage.line[k_] = 0;                                \
        }                                                              \
        p->fir##stage.pos = 0u;                                        \
        p->fir##stage.phase = 0u;                                      \
    }
#define HT_BIQUAD_RESET(stage, section, b0, b1, b2, a1, a2, q)         \
    p->biquad##stage##_##section.x1 = 0;                               \
    p->biquad##stage##_##section.x2 = 0;                               \
    p->biquad##stage##_##section.y1 = 0;                               \
    p->biquad##stage##_##section.y2 = 0;                               \
    p->biquad##stage##_##section.e = 0;

void ht_pipeline_reset(ht_pipeline_t *p)
{
    HT_D(CASCADE)(HT_FIR_RESET, HT_BIQUAD_RESET)
    p->pending = 0u;
}

void ht_pipeline_init(ht_pipeline_t *p)
{
    ht_constants_default(&p->constants);
    p->calibrated = false;
    ht_pipeline_reset(p);
}

/* One step of the cascade: an FIR stage (return early while it decimates) or a section. */
#define HT_FIR_RUN(stage, taps, length, frac, decimation)                                 \
    if (!ht_fir_step(p->fir##stage.line, &p->fir##stage.pos, &p->fir##stage.phase, taps, \
                     (uint32_t)(length), (unsigned)(frac), (uint32_t)(decimation), &v)) { \
        p->pending = status;                                                              \
        return 0u;                                                                        \
    }
#define HT_BIQUAD_RUN(stage, section, b0, b1, b2, a1, a2, q)                           \
    v = ht_biquad_step(&p->biquad##stage##_##section.x1, &p->biquad##stage##_##section.x2, \
                       &p->biquad##stage##_##section.y1, &p->biquad##stage##_##section.y2, \
                       &p->biquad##stage##_##section.e, b0, b1, b2, a1, a2, (unsigned)(q), v);

ht_status_t ht_process(ht_pipeline_t *p, int32_t code, int32_t temp_centi, int32_t *out)
{
    ht_status_t status = p->pending;
    bool clamped = false;
    int32_t v;

    if (code >= HT_D(ADC_CODE_HIGHEST)) {
        code = HT_D(ADC_CODE_HIGHEST);
        status |= HT_STATUS_INPUT_RAIL;
    } else if (code <= HT_D(ADC_CODE_LOWEST)) {
        code = HT_D(ADC_CODE_LOWEST);
        status |= HT_STATUS_INPUT_RAIL;
    }
    v = ht_sat32((int64_t)code * ht_pow2((unsigned)HT_D(GUARD_BITS)) - p->constants.offset);
    HT_D(CASCADE)(HT_FIR_RUN, HT_BIQUAD_RUN)
    *out = ht_static_path(&p->constants, v, temp_centi, &clamped);
    p->pending = 0u;
    if (clamped) {
        status |= HT_STATUS_SATURATED;
    }
    if (!p->calibrated) {
        status |= HT_STATUS_UNCALIBRATED;
    }
    return status | HT_STATUS_READY;
}

int32_t ht_settled_output(const ht_pipeline_t *p, int32_t code, int32_t temp_centi)
{
    bool clamped = false;
    int32_t v;

    if (code > HT_D(ADC_CODE_HIGHEST)) {
        code = HT_D(ADC_CODE_HIGHEST);
    } else if (code < HT_D(ADC_CODE_LOWEST)) {
        code = HT_D(ADC_CODE_LOWEST);
    }
    v = ht_sat32((int64_t)code * ht_pow2((unsigned)HT_D(GUARD_BITS)) - p->constants.offset);
    return ht_static_path(&p->constants, v, temp_centi, &clamped);
}
