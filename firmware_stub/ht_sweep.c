/*
 * ht_sweep.c - the pipeline driven in memory, built as a host shared library for
 * `hosttool verify --engine c|both` and the benchmarks (no text I/O).
 *
 * The compiled-in default constants are the ones in force (render the design, or one
 * unit's calibration, as the defaults). Functions:
 *   ht_sweep_settled  the settled output of `count` consecutive codes from `first` at one
 *                     temperature (ht_settled_output): the exhaustive static proof.
 *   ht_sweep_record   a record of codes (and temperatures, or NULL for the design's
 *                     reference) through ht_process from reset; returns the number of
 *                     outputs written.
 * Each call keeps its own pipeline on its stack, so calls from several threads at once
 * are safe.
 */
#include <stddef.h>
#include <stdint.h>

#include "ht_pipeline.h"

#if HT_D(HAS_TEMPERATURE)
#define HT_SWEEP_TEMP_DEFAULT HT_D(TEMP_REF_CENTI)
#else
#define HT_SWEEP_TEMP_DEFAULT 0
#endif

void ht_sweep_settled(int32_t first, uint32_t count, int32_t temp_centi, int32_t *out);
uint32_t ht_sweep_record(const int32_t *codes, const int32_t *temps, uint32_t count,
                         int32_t *out);

void ht_sweep_settled(int32_t first, uint32_t count, int32_t temp_centi, int32_t *out)
{
    ht_pipeline_t p;
    uint32_t i;

    ht_pipeline_init(&p);
    for (i = 0u; i < count; ++i) {
        out[i] = ht_settled_output(&p, (int32_t)((int64_t)first + (int64_t)i), temp_centi);
    }
}

uint32_t ht_sweep_record(const int32_t *codes, const int32_t *temps, uint32_t count,
                         int32_t *out)
{
    ht_pipeline_t p;
    uint32_t i;
    uint32_t n = 0u;

    ht_pipeline_init(&p);
    for (i = 0u; i < count; ++i) {
        int32_t t = (temps == NULL) ? HT_SWEEP_TEMP_DEFAULT : temps[i];

        if (ht_process(&p, codes[i], t, &out[n])) {
            ++n;
        }
    }
    return n;
}
