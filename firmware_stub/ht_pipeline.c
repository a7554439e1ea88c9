/*
 * ht_pipeline.c - the per-sample integer pipeline. See ht_pipeline.h and the arithmetic
 * contract in DEVELOPERS.md; hosttool.design.model.run_integer is the same arithmetic in
 * Python and the tests require both to agree bit for bit.
 *
 * The steps are the design header's functions (offset, filters, scale, linearise,
 * temperature), each specialised by the exact ranges printed beside it; this file checks
 * the target, keeps the state and makes the status word.
 */
#include "ht_pipeline.h"

#include <stddef.h>

/*
 * Compile-time checks (C99 has no static assertion: an array of negative size is a
 * compile error). Rounding shifts rely on >> of a negative value being arithmetic
 * (floor), and narrowing on two's complement, which C leaves to the implementation.
 */
typedef char ht_check_arithmetic_shift[((-1 >> 1) == -1) ? 1 : -1];
typedef char ht_check_arithmetic_shift64[((-INT64_C(1) >> 1) == -INT64_C(1)) ? 1 : -1];
typedef char ht_check_twos_complement[(INT32_MIN == -INT32_MAX - 1) ? 1 : -1];

/* Fraction bits of the linearisation variable and coefficients, and of the span gain. */
#if HT_D(HAS_LINEARISATION) && HT_D(LIN_FRAC) != 30
#error "the design's linearisation format is not the Q30 this firmware computes in"
#endif

/* Steps 3 to 5 on chain word v: scale, linearisation, temperature (*clamped as the steps). */
static inline int32_t ht_static_steps(const ht_constants_t *c, int32_t v, int32_t temp_centi,
                                      int *clamped)
{
    v = HT_D(scale)(v, c->scale_mul, clamped);
#if HT_D(HAS_LINEARISATION)
    v = HT_D(linearise)(v, c->lin, clamped);
#endif
#if HT_D(HAS_TEMPERATURE)
    v = HT_D(temperature)(v, temp_centi, c->tc_zero, c->tc_span, clamped);
#else
    (void)temp_centi;
#endif
    return v;
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

void ht_pipeline_reset(ht_pipeline_t *p)
{
    HT_D(filters_reset)(&p->filters);
    p->pending = 0u;
}

void ht_pipeline_init(ht_pipeline_t *p)
{
    ht_constants_default(&p->constants);
    p->calibrated = false;
    ht_pipeline_reset(p);
}

ht_status_t ht_process(ht_pipeline_t *p, int32_t code, int32_t temp_centi, int32_t *out)
{
    ht_status_t status = 0u;
    int clamped = 0;
    int32_t v;

    if (code >= HT_D(ADC_CODE_HIGHEST)) {
        code = HT_D(ADC_CODE_HIGHEST);
        status = HT_STATUS_INPUT_RAIL;
    } else if (code <= HT_D(ADC_CODE_LOWEST)) {
        code = HT_D(ADC_CODE_LOWEST);
        status = HT_STATUS_INPUT_RAIL;
    }
    v = HT_D(offset)(code, p->constants.offset);
#if HT_D(DECIMATION) > 1
    if (!HT_D(filters)(&p->filters, &v)) {
        p->pending |= status;
        return 0u;
    }
    status |= p->pending;
    p->pending = 0u;
#else
    (void)HT_D(filters)(&p->filters, &v);
#endif
    *out = ht_static_steps(&p->constants, v, temp_centi, &clamped);
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
    int clamped = 0;

    if (code > HT_D(ADC_CODE_HIGHEST)) {
        code = HT_D(ADC_CODE_HIGHEST);
    } else if (code < HT_D(ADC_CODE_LOWEST)) {
        code = HT_D(ADC_CODE_LOWEST);
    }
    /* a settled chain word lies inside the offset step's range, which the scale step's
       range covers (every filter's integer DC gain is 1) */
    return ht_static_steps(&p->constants, HT_D(offset)(code, p->constants.offset),
                           temp_centi, &clamped);
}
