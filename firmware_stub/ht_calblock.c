/*
 * ht_calblock.c - loader of the per-unit calibration block. See ht_calblock.h.
 */
#include "ht_calblock.h"

#include "ht_crc32.h"

#include HT_D(CALBLOCK_HEADER_NAME)

/*
 * The generated header formats and block layouts this loader is written for. Headers of
 * layout 2 bind blocks to the design's format identity (format_id) and still accept a
 * layout-1 block whose spec hash is this spec's; headers of layout 1 (hosttool 0.2) accept
 * layout-1 blocks only, as the firmware of that version did.
 */
#if HT_D(CALBLOCK_HEADER_FORMAT) != 1
#error "the calibration-block header is not the format ht_calblock.c reads"
#endif
#if HT_D(CALBLOCK_LAYOUT_VERSION) == 2
#define HT_BINDING_FIELD FORMAT_ID
#elif HT_D(CALBLOCK_LAYOUT_VERSION) == 1
#define HT_BINDING_FIELD SPEC_HASH
#else
#error "the calibration-block header is not a layout ht_calblock.c reads"
#endif
#if HT_D(CALBLOCK_SPEC_ID) != HT_D(DESIGN_SPEC_ID)
#error "the design and calibration-block headers were rendered from different specs"
#endif
typedef char ht_check_lin_slots[(HT_D(LIN_COUNT) <= HT_D(CALBLOCK_LIN_SLOTS)) ? 1 : -1];

/* The values a block must carry to match the compiled design. */
#if HT_D(HAS_TEMPERATURE)
#define HT_EXPECT_ZERO_SHIFT HT_D(TC_ZERO_SHIFT)
#define HT_EXPECT_SPAN_SHIFT HT_D(TC_SPAN_SHIFT)
#define HT_EXPECT_REF_TEMP HT_D(TEMP_REF_CENTI)
#else
#define HT_EXPECT_ZERO_SHIFT 0
#define HT_EXPECT_SPAN_SHIFT 0
#define HT_EXPECT_REF_TEMP 0
#endif

/* Little-endian field readers at byte offset `at`. */
static uint32_t ht_le_u32(const uint8_t *b, size_t at)
{
    return (uint32_t)b[at] | ((uint32_t)b[at + 1u] << 8) | ((uint32_t)b[at + 2u] << 16)
           | ((uint32_t)b[at + 3u] << 24);
}

static uint16_t ht_le_u16(const uint8_t *b, size_t at)
{
    return (uint16_t)((unsigned)b[at] | ((unsigned)b[at + 1u] << 8));
}

/* Two's-complement int32 from its bit pattern, without implementation-defined casts. */
static int32_t ht_le_i32(const uint8_t *b, size_t at)
{
    uint32_t u = ht_le_u32(b, at);

    if (u <= (uint32_t)INT32_MAX) {
        return (int32_t)u;
    }
    return (int32_t)(u - 0x80000000u) - INT32_MAX - 1;
}

#define HT_FIELD(name) ((size_t)HT_D(CALBLOCK_OFFSET_##name))
#define HT_FIELD_OF(name) HT_FIELD(name)

/* The 8 binding bytes of the block at `b`: equal to `expected`? */
static int ht_same_binding(const uint8_t *b, const uint8_t *expected)
{
    size_t i;

    for (i = 0u; i < 8u; ++i) {
        if (b[HT_FIELD_OF(HT_BINDING_FIELD) + i] != expected[i]) {
            return 0;
        }
    }
    return 1;
}

/*
 * The block's binding against this design: HT_CAL_OK, HT_CAL_OTHER_DESIGN (layout 2,
 * format identity differs), HT_CAL_OTHER_SPEC (layout 1, spec hash differs) or
 * HT_CAL_BAD_VERSION.
 */
static ht_cal_status_t ht_binding(const uint8_t *b)
{
    static const uint8_t spec_hash[8] = HT_D(CALBLOCK_SPEC_HASH_BYTES);
    unsigned version = ht_le_u16(b, HT_FIELD(LAYOUT_VERSION));

#if HT_D(CALBLOCK_LAYOUT_VERSION) == 2
    static const uint8_t format_id[8] = HT_D(CALBLOCK_FORMAT_ID_BYTES);

    if (version == 2u) {
        return ht_same_binding(b, format_id) ? HT_CAL_OK : HT_CAL_OTHER_DESIGN;
    }
#endif
    if (version == 1u) {
        return ht_same_binding(b, spec_hash) ? HT_CAL_OK : HT_CAL_OTHER_SPEC;
    }
    return HT_CAL_BAD_VERSION;
}

/* The block's fields against the compiled design's shifts, counts, flags, reference. */
static int ht_same_format(const uint8_t *b)
{
    return b[HT_FIELD(SCALE_SHIFT)] == HT_D(SCALE_SHIFT)
           && b[HT_FIELD(GUARD_BITS)] == HT_D(GUARD_BITS)
           && b[HT_FIELD(LIN_COUNT)] == HT_D(LIN_COUNT)
           && b[HT_FIELD(FLAGS)] == HT_D(CALBLOCK_FLAGS)
           && b[HT_FIELD(TC_ZERO_SHIFT)] == HT_EXPECT_ZERO_SHIFT
           && b[HT_FIELD(TC_SPAN_SHIFT)] == HT_EXPECT_SPAN_SHIFT
           && ht_le_i32(b, HT_FIELD(REF_TEMP_CENTI)) == HT_EXPECT_REF_TEMP;
}

/* Constants within the limits of hosttool's check_constants (design.py). */
static int ht_in_range(const ht_constants_t *c)
{
    int64_t lin_sum = 0;
    int i;

    if (c->offset < -HT_D(OFFSET_LIMIT) || c->offset > HT_D(OFFSET_LIMIT)
        || c->scale_mul < -HT_D(SCALE_MUL_LIMIT) || c->scale_mul > HT_D(SCALE_MUL_LIMIT)
        || c->tc_zero == INT32_MIN || c->tc_span == INT32_MIN) {
        return 0;
    }
    for (i = 0; i < HT_D(LIN_COUNT); ++i) {
        if (c->lin[i] == INT32_MIN) {
            return 0;
        }
        lin_sum += c->lin[i] < 0 ? -(int64_t)c->lin[i] : (int64_t)c->lin[i];
    }
    return lin_sum < (INT64_C(4) << 30);
}

/* Check `b` and read its constants into `c`; HT_CAL_OK when it may be used. */
static ht_cal_status_t ht_check(const uint8_t *b, size_t len, ht_constants_t *c)
{
    const size_t length = (size_t)HT_D(CALBLOCK_LENGTH);
    ht_cal_status_t binding;

    if (b == NULL || len < length) {
        return HT_CAL_TOO_SHORT;
    }
    if (ht_le_u32(b, HT_FIELD(MAGIC)) != HT_D(CALBLOCK_MAGIC)) {
        return HT_CAL_BAD_MAGIC;
    }
    if (ht_le_u16(b, HT_FIELD(LAYOUT_VERSION)) > HT_D(CALBLOCK_LAYOUT_VERSION)
        || ht_le_u16(b, HT_FIELD(LAYOUT_VERSION)) < 1u) {
        return HT_CAL_BAD_VERSION;
    }
    if (ht_le_u16(b, HT_FIELD(LENGTH)) != length) {
        return HT_CAL_BAD_LENGTH;
    }
    if (ht_crc32_update(HT_CRC32_EMPTY, b, HT_FIELD(CRC32)) != ht_le_u32(b, HT_FIELD(CRC32))) {
        return HT_CAL_BAD_CRC;
    }
    binding = ht_binding(b);
    if (binding != HT_CAL_OK) {
        return binding;
    }
    if (!ht_same_format(b)) {
        return HT_CAL_OTHER_FORMAT;
    }
    ht_constants_default(c);
    c->offset = ht_le_i32(b, HT_FIELD(OFFSET));
    c->scale_mul = ht_le_i32(b, HT_FIELD(SCALE_MUL));
#if HT_D(HAS_LINEARISATION)
    for (size_t i = 0u; i < (size_t)HT_D(LIN_COUNT); ++i) {
        c->lin[i] = ht_le_i32(b, HT_FIELD(LIN) + 4u * i);
    }
#endif
#if HT_D(HAS_TEMPERATURE)
    c->tc_zero = ht_le_i32(b, HT_FIELD(TC_ZERO));
    c->tc_span = ht_le_i32(b, HT_FIELD(TC_SPAN));
#endif
    return ht_in_range(c) ? HT_CAL_OK : HT_CAL_OUT_OF_RANGE;
}

ht_cal_status_t ht_calblock_load(ht_pipeline_t *p, const uint8_t *block, size_t len)
{
    ht_constants_t c;
    ht_cal_status_t status = ht_check(block, len, &c);

    if (status == HT_CAL_OK) {
        p->constants = c;
        p->calibrated = true;
    } else {
        ht_constants_default(&p->constants);
        p->calibrated = false;
    }
    return status;
}

const char *ht_cal_status_text(ht_cal_status_t status)
{
    switch (status) {
    case HT_CAL_OK:
        return "ok";
    case HT_CAL_TOO_SHORT:
        return "too short";
    case HT_CAL_BAD_MAGIC:
        return "bad magic";
    case HT_CAL_BAD_VERSION:
        return "other layout version";
    case HT_CAL_BAD_LENGTH:
        return "bad length";
    case HT_CAL_BAD_CRC:
        return "bad CRC";
    case HT_CAL_OTHER_SPEC:
        return "made for another spec";
    case HT_CAL_OTHER_DESIGN:
        return "made for another design";
    case HT_CAL_OTHER_FORMAT:
        return "shifts or counts differ from the design";
    case HT_CAL_OUT_OF_RANGE:
        return "constant out of range";
    }
    return "unknown status";
}
