/*
 * ht_calblock.h - loader of the per-unit calibration block (layout versions 1 and 2).
 *
 * The block's layout comes from the generated calibration-block header (its name is the
 * design header's CALBLOCK_HEADER_NAME); fields are read byte by byte at their offsets,
 * little-endian, so the loader works on any host byte order and any alignment of the
 * block in memory.
 *
 * A block is accepted only if everything holds: length, magic, layout version, length
 * field, CRC-32 (ht_crc32.h), binding (layout 2: the design's format identity, which
 * survives spec edits that leave the constants' meaning alone; layout 1: the spec's hash),
 * every shift, count and flag equal to the compiled design, and constants inside the
 * limits the design's range proof assumed. On
 * any mismatch the compiled-in defaults are put in force and the pipeline is flagged
 * uncalibrated.
 */
#ifndef HT_CALBLOCK_H
#define HT_CALBLOCK_H

#include <stddef.h>
#include <stdint.h>

#include "ht_pipeline.h"

/* Outcome of ht_calblock_load, in the order the checks run. */
typedef enum {
    HT_CAL_OK = 0,          /* accepted; its constants are in force */
    HT_CAL_TOO_SHORT,       /* fewer bytes than the layout's length */
    HT_CAL_BAD_MAGIC,       /* no block here (erased flash reads as 0xFF) */
    HT_CAL_BAD_VERSION,     /* another layout version */
    HT_CAL_BAD_LENGTH,      /* its length field differs from the layout's */
    HT_CAL_BAD_CRC,         /* contents damaged */
    HT_CAL_OTHER_SPEC,      /* layout 1: made for another spec (spec hash differs) */
    HT_CAL_OTHER_DESIGN,    /* layout 2: made for another design (format identity differs) */
    HT_CAL_OTHER_FORMAT,    /* shifts, guard bits, counts, flags or reference differ */
    HT_CAL_OUT_OF_RANGE     /* a constant beyond what the design's proof covers */
} ht_cal_status_t;

/*
 * Check the block of `len` bytes at `block` and put its constants in force in `p`, or
 * the compiled-in defaults on any mismatch (p->calibrated tells which). Filter state is
 * not touched: load before processing, or call ht_pipeline_reset() after.
 */
HT_MUST_USE ht_cal_status_t ht_calblock_load(ht_pipeline_t *p, const uint8_t *block,
                                             size_t len);

/* A short English description of a status (never NULL). */
const char *ht_cal_status_text(ht_cal_status_t status);

#endif /* HT_CALBLOCK_H */
