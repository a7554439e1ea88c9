/*
 * ht_pipeline.h - the per-sample integer pipeline of the hosttool reference firmware.
 *
 * Follows the arithmetic contract of DEVELOPERS.md step by step: offset, the filter
 * cascade (FIR with decimation, biquads with error feedback), scale, linearisation,
 * temperature. The steps themselves come from the header `hosttool render` generates,
 * specialised for the design by what its range proofs allow (see the header's "Steps"
 * section); this file and ht_pipeline.c compile unchanged for any spec. No allocation, no
 * floating point, no globals: all mutable data is in one ht_pipeline_t the caller owns.
 *
 * The constants in ht_pipeline_t must stay within the limits the design header states
 * (OFFSET_LIMIT, SCALE_MUL_LIMIT, sum |C_k| < 2^32, no coefficient at -2^31): the steps are
 * proven for those and no others. ht_calblock_load() enforces them.
 *
 * Configuration macros (on the compiler command line):
 *   HT_DESIGN_HEADER  the generated design header as a string literal,
 *                     e.g. -DHT_DESIGN_HEADER='"hive_scale_design.h"'
 *   HT_DESIGN_PREFIX  the prefix of its names, e.g. -DHT_DESIGN_PREFIX=HIVE_SCALE
 *   HT_NAME_PREFIX    optional: the prefix of the firmware's public functions and types
 *                     instead of ht_, e.g. -DHT_NAME_PREFIX=hive_ turns ht_process into
 *                     hive_process and ht_pipeline_t into hive_pipeline_t. Two specs then
 *                     build into one program: compile ht_pipeline.c and ht_calblock.c once
 *                     per spec, each with its own three macros, and ht_crc32.c once. Code
 *                     compiled with the same macros may keep writing the ht_ names.
 *
 * Use: ht_pipeline_init() once (compiled-in defaults, uncalibrated), optionally
 * ht_calblock_load() (ht_calblock.h), then ht_process() for each raw ADC code; the status
 * word it returns says whether an output is ready and whether it can be trusted.
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

/* The public names under HT_NAME_PREFIX (see above); ht_ names when it is not defined. */
#ifdef HT_NAME_PREFIX
#define HT_NAME(name) HT_CAT(HT_NAME_PREFIX, name)
#define ht_constants_t HT_NAME(constants_t)
#define ht_pipeline_t HT_NAME(pipeline_t)
#define ht_constants_default HT_NAME(constants_default)
#define ht_pipeline_init HT_NAME(pipeline_init)
#define ht_pipeline_reset HT_NAME(pipeline_reset)
#define ht_process HT_NAME(process)
#define ht_settled_output HT_NAME(settled_output)
#define ht_cal_status_t HT_NAME(cal_status_t)
#define ht_calblock_load HT_NAME(calblock_load)
#define ht_cal_status_text HT_NAME(cal_status_text)
#endif

/*
 * The status word ht_process() returns: zero while no output is ready (a decimating stage
 * waits for more inputs), else HT_STATUS_READY and any of the flags below, which describe
 * the output just stored.
 */
typedef uint32_t ht_status_t;
/* *out holds a new output sample. */
#define HT_STATUS_READY 0x01u
/* The compiled-in default constants are in force: no valid calibration block was loaded
 * (ht_calblock_load() refused it, or was never called); the output is not this unit's. */
#define HT_STATUS_UNCALIBRATED 0x02u
/* An input code at or beyond the ADC's lowest or highest code arrived since the previous
 * output (codes beyond are taken as the rail): the converter was overloaded. */
#define HT_STATUS_INPUT_RAIL 0x04u
/* A saturation clamped a value on the way to this output: it is the nearest int32, not
 * the true result. Only the steps whose range proof allows it can set this flag. */
#define HT_STATUS_SATURATED 0x08u

/* The header format this firmware is written for. */
#define HT_DESIGN_FORMAT_EXPECTED 2
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

/* All mutable data of one pipeline. */
typedef struct {
    ht_constants_t constants;
    bool calibrated;          /* constants from a valid calibration block */
    ht_status_t pending;      /* flags of the inputs since the last output */
    HT_D(filters_t) filters;  /* every filter stage's state (the design header's steps) */
} ht_pipeline_t;

/* The compiled-in default constants (the design header's *_DEFAULT values). */
void ht_constants_default(ht_constants_t *c);

/* Defaults in force, flagged uncalibrated, every filter at rest. */
void ht_pipeline_init(ht_pipeline_t *p);

/* Every filter back to rest (zero state); constants unchanged. */
void ht_pipeline_reset(ht_pipeline_t *p);

/*
 * Feed one raw code (int32, sign-extended ADC code) and the temperature in 0.01 C that
 * goes with it (ignored by designs without temperature compensation). When an output
 * sample is ready, stores it in *out (output LSB) and returns HT_STATUS_READY with the
 * flags that apply to it; returns 0 while a decimating stage waits for more inputs (*out
 * untouched). `if (ht_process(...))` therefore still reads "an output is ready".
 */
HT_MUST_USE ht_status_t ht_process(ht_pipeline_t *p, int32_t code, int32_t temp_centi,
                                   int32_t *out);

/*
 * The output the pipeline settles to while `code` is held at its input at temperature
 * temp_centi (0.01 C), with the constants in force: offset, scale, linearisation and
 * temperature alone, since every filter's integer DC gain is exactly 1. No state changes.
 * The exhaustive static proof (ht_sweep.c) runs every ADC code through it.
 */
int32_t ht_settled_output(const ht_pipeline_t *p, int32_t code, int32_t temp_centi);

#endif /* HT_PIPELINE_H */
