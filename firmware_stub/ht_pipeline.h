/*
 * ht_pipeline.h - the per-sample integer pipeline of the hosttool reference firmware.
 *
 * Follows the arithmetic contract of DEVELOPERS.md step by step: offset, the filter
 * cascade (FIR with decimation, biquads with error feedback), scale, linearisation,
 * temperature. It is generic over the design: every constant, and the cascade itself
 * (an X-macro list), comes from the header `hosttool render` generates, so this code
 * compiles unchanged for any spec. No allocation, no floating point, no globals: all
 * mutable data is in one ht_pipeline_t the caller owns.
 *
 * Configuration macros (on the compiler command line):
 *   HT_DESIGN_HEADER  the generated design header as a string literal,
 *                     e.g. -DHT_DESIGN_HEADER='"hive_scale_design.h"'
 *   HT_DESIGN_PREFIX  the prefix of its names, e.g. -DHT_DESIGN_PREFIX=HIVE_SCALE
 *
 * Use: ht_pipeline_init() once (compiled-in defaults, uncalibrated), optionally
 * ht_calblock_load() (ht_calblock.h), then ht_process() for each raw ADC code.
 */
#ifndef HT_PIPELINE_H
#define HT_PIPELINE_H

#include <stdbool.h>
#include <stdint.h>

#if !defined(HT_DESIGN_HEADER) || !defined(HT_DESIGN_PREFIX)
#error "define HT_DESIGN_HEADER and HT_DESIGN_PREFIX (see ht_pipeline.h)"
#endif

#include HT_DESIGN_HEADER

#include "ht_common.h"

/* HT_D(NAME) is the design's PREFIX_NAME. */
#define HT_CAT_(a, b) a##b
#define HT_CAT(a, b) HT_CAT_(a, b)
#define HT_D(name) HT_CAT(HT_DESIGN_PREFIX, _##name)

/* The header format this firmware is written for. */
#define HT_DESIGN_FORMAT_EXPECTED 1
#if HT_D(DESIGN_HEADER_FORMAT) != HT_DESIGN_FORMAT_EXPECTED
#error "the design header's format is not the one ht_pipeline.c was written for: render it again with a matching hosttool"
#endif

/* Slots for the linearisation coefficients C_0 .. C_n (at least one, for C99). */
#if HT_D(LIN_COUNT) > 0
#define HT_LIN_SLOTS HT_D(LIN_COUNT)
#else
#define HT_LIN_SLOTS 1
#endif

/* The per-unit constants in force (the integers of a calibration block). */
typedef struct {
    int32_t offset;           /* zero, ADC counts x 2^G */
    int32_t scale_mul;        /* span multiplier M (shift: the design's SCALE_SHIFT) */
    int32_t lin[HT_LIN_SLOTS]; /* C_0 .. C_n, Q30 (unused without linearisation) */
    int32_t tc_zero;          /* Kz, output LSB per 0.01 C (shift TC_ZERO_SHIFT) */
    int32_t tc_span;          /* Ks, Q30 gain per 0.01 C (shift TC_SPAN_SHIFT) */
} ht_constants_t;

/*
 * State of one FIR stage: the last `length` inputs stored twice (line[pos + k] is
 * x[n - k] for k < length, without wrapping), and the decimation phase.
 */
#define HT_FIR_STATE(stage, taps, length, frac, decimation) \
    struct {                                                \
        int32_t line[2u * (length)];                        \
        uint32_t pos;                                       \
        uint32_t phase;                                     \
    } fir##stage;

/* State of one biquad section: previous inputs and outputs, error feedback. */
#define HT_BIQUAD_STATE(stage, section, b0, b1, b2, a1, a2, q) \
    struct {                                                   \
        int32_t x1, x2, y1, y2;                                \
        int64_t e;                                             \
    } biquad##stage##_##section;

/* All mutable data of one pipeline. */
typedef struct {
    ht_constants_t constants;
    bool calibrated;          /* constants from a valid calibration block */
    HT_D(CASCADE)(HT_FIR_STATE, HT_BIQUAD_STATE)
} ht_pipeline_t;

/* The compiled-in default constants (the design header's *_DEFAULT values). */
void ht_constants_default(ht_constants_t *c);

/* Defaults in force, flagged uncalibrated, every filter at rest. */
void ht_pipeline_init(ht_pipeline_t *p);

/* Every filter back to rest (zero state); constants unchanged. */
void ht_pipeline_reset(ht_pipeline_t *p);

/*
 * Feed one raw code (int32, sign-extended ADC code) and the temperature in 0.01 C that
 * goes with it (ignored by designs without temperature compensation). Returns true when
 * an output sample is ready and stores it in *out, in output LSB; returns false while a
 * decimating stage waits for more inputs (*out untouched).
 */
HT_MUST_USE bool ht_process(ht_pipeline_t *p, int32_t code, int32_t temp_centi, int32_t *out);

#endif /* HT_PIPELINE_H */
