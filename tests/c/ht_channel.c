/*
 * ht_channel.c - one design's pipeline behind two plain functions, for the test that builds
 * two specs into one program (tests/test_firmware.py). Compiled once per design, each time
 * with its own HT_DESIGN_HEADER, HT_DESIGN_PREFIX and HT_NAME_PREFIX; it writes the ht_
 * names, which HT_NAME_PREFIX turns into that design's own.
 */
#include "ht_pipeline.h"

void HT_NAME(channel_start)(void);
uint32_t HT_NAME(channel_step)(int32_t code, int32_t temp_centi, int32_t *out);

static ht_pipeline_t ht_channel;

void HT_NAME(channel_start)(void)
{
    ht_pipeline_init(&ht_channel);
}

uint32_t HT_NAME(channel_step)(int32_t code, int32_t temp_centi, int32_t *out)
{
    return ht_process(&ht_channel, code, temp_centi, out);
}
