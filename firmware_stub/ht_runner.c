/*
 * ht_runner.c - runs the pipeline on samples read from stdin, for tests and figures.
 *
 * Input, one command per line (LF line ends):
 *     <code> [<temp_centi>]   one raw ADC code (decimal int32) and optionally the
 *                             temperature in 0.01 C (default: the design's reference)
 *     cal <hex>               load a calibration block given as hex digit pairs; the
 *                             outcome goes to stderr as "ht_runner: calblock <status>,
 *                             calibrated <0|1>"; filters are reset
 * Output: one line on stdout per output sample: the value in output LSB (decimal) and the
 * status word of ht_process() (ht_pipeline.h) as "0x" and two hex digits, for example
 * "18656 0x03" (ready, uncalibrated). At the end one summary line on stderr:
 *     ht_runner: samples <n> outputs <n>[ ticks <n> empty_ticks <n>]
 * The ticks (target builds with HT_HAVE_CYCLES) are SysTick ticks spent inside
 * ht_process() over all samples, each call timed by two ht_cycles_read(); empty_ticks is
 * the same number of empty timed intervals, the overhead to subtract. Under QEMU with
 * -icount shift=0 one tick is 40 instructions (ht_cycles.h).
 *
 * A malformed line is reported on stderr with its number and ends the run with exit
 * status 2; a read or write error gives 1.
 *
 * Speed under QEMU semihosting: every semihosting call is one trap into the emulator
 * whatever it moves, so stdin and stdout get large fully buffered stdio buffers (as in
 * crc_runner.c), and numbers are parsed and printed by hand instead of by scanf/printf.
 */
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <string.h>

#include "ht_calblock.h"
#ifdef HT_HAVE_CYCLES
#include "ht_cycles.h"
#endif

/* Longest input line accepted, LF included: "cal " and a block of up to 512 bytes. */
#define HT_RUNNER_LINE 1100u
/* Most calibration-block bytes one "cal" line may carry. */
#define HT_RUNNER_BLOCK 512u
/* Size of each of the stdin and stdout buffers, in bytes. */
#define HT_RUNNER_IO_BUFFER 16384u

/* Exit statuses. */
#define HT_RUNNER_OK 0
#define HT_RUNNER_IO_ERROR 1
#define HT_RUNNER_BAD_INPUT 2

/* Outcome of one input line. */
typedef enum {
    HT_LINE_DONE,      /* handled */
    HT_LINE_MALFORMED, /* not a sample or a cal command */
    HT_LINE_WRITE_ERROR
} ht_line_t;

#if HT_D(HAS_TEMPERATURE)
#define HT_RUNNER_TEMP_DEFAULT HT_D(TEMP_REF_CENTI)
#else
#define HT_RUNNER_TEMP_DEFAULT 0
#endif

/* All mutable state of the program (static: stdio uses the buffers until exit). */
static struct {
    char in_buffer[HT_RUNNER_IO_BUFFER];
    char out_buffer[HT_RUNNER_IO_BUFFER];
    char line[HT_RUNNER_LINE + 1u];
    uint8_t block[HT_RUNNER_BLOCK];
    ht_pipeline_t pipeline;
    unsigned long samples;
    unsigned long outputs;
#ifdef HT_HAVE_CYCLES
    uint64_t ticks;
    uint64_t empty_ticks;
#endif
} ht_runner;

/*
 * Parse a decimal int32 at *s (optional sign, digits), skipping leading spaces; advance
 * *s past it. Returns 0 on success, -1 if there is no number or it overflows int32.
 */
HT_MUST_USE static int ht_runner_int(const char **s, int32_t *value)
{
    const char *p = *s;
    int negative = 0;
    int64_t magnitude = 0;
    int digits = 0;

    while (*p == ' ' || *p == '\t') {
        ++p;
    }
    if (*p == '-' || *p == '+') {
        negative = *p == '-';
        ++p;
    }
    while (*p >= '0' && *p <= '9') {
        magnitude = magnitude * 10 + (*p - '0');
        if (magnitude > INT64_C(2147483648)) {
            return -1;
        }
        ++p;
        ++digits;
    }
    if (digits == 0 || (!negative && magnitude > INT32_MAX)) {
        return -1;
    }
    *value = (int32_t)(negative ? -magnitude : magnitude);
    *s = p;
    return 0;
}

/* Write `value`, its status word and LF to stdout; returns EOF on a write error. */
static int ht_runner_print(int32_t value, ht_status_t status)
{
    static const char digits[] = "0123456789abcdef";
    char text[20];
    size_t at = sizeof text - 1u;
    int64_t v = value;
    uint64_t u = (uint64_t)(v < 0 ? -v : v);

    text[at] = '\0';
    text[--at] = '\n';
    text[--at] = digits[status & 0xFu];
    text[--at] = digits[(status >> 4) & 0xFu];
    text[--at] = 'x';
    text[--at] = '0';
    text[--at] = ' ';
    do {
        text[--at] = (char)('0' + (int)(u % 10u));
        u /= 10u;
    } while (u != 0u);
    if (v < 0) {
        text[--at] = '-';
    }
    return fputs(&text[at], stdout);
}

/* "cal <hex>": decode and load the block, then reset the filters. */
HT_MUST_USE static ht_line_t ht_runner_cal(const char *hex)
{
    size_t n = 0u;
    ht_cal_status_t status;

    while (*hex == ' ') {
        ++hex;
    }
    while (hex[0] != '\0') {
        int hi = ht_hex_value(hex[0]);
        int lo = hi < 0 ? -1 : ht_hex_value(hex[1]);
        if (lo < 0 || n == HT_RUNNER_BLOCK) {
            return HT_LINE_MALFORMED;
        }
        ht_runner.block[n++] = (uint8_t)((hi << 4) | lo);
        hex += 2;
    }
    status = ht_calblock_load(&ht_runner.pipeline, ht_runner.block, n);
    ht_pipeline_reset(&ht_runner.pipeline);
    fprintf(stderr, "ht_runner: calblock %s, calibrated %d\n", ht_cal_status_text(status),
            ht_runner.pipeline.calibrated ? 1 : 0);
    return HT_LINE_DONE;
}

/* The pipeline on one sample, timed on targets. */
HT_MUST_USE static ht_status_t ht_runner_process(int32_t code, int32_t temp, int32_t *out)
{
#ifdef HT_HAVE_CYCLES
    uint64_t t0 = ht_cycles_read();
    ht_status_t status = ht_process(&ht_runner.pipeline, code, temp, out);
    uint64_t t1 = ht_cycles_read();
    ht_runner.ticks += t1 - t0;
    return status;
#else
    return ht_process(&ht_runner.pipeline, code, temp, out);
#endif
}

/* One sample line: "<code> [<temp_centi>]". */
HT_MUST_USE static ht_line_t ht_runner_sample(const char *s)
{
    int32_t code;
    int32_t temp = HT_RUNNER_TEMP_DEFAULT;
    int32_t out;
    ht_status_t status;

    if (ht_runner_int(&s, &code) != 0) {
        return HT_LINE_MALFORMED;
    }
    while (*s == ' ' || *s == '\t') {
        ++s;
    }
    if (*s != '\0' && (ht_runner_int(&s, &temp) != 0)) {
        return HT_LINE_MALFORMED;
    }
    while (*s == ' ' || *s == '\t') {
        ++s;
    }
    if (*s != '\0') {
        return HT_LINE_MALFORMED;
    }
    ++ht_runner.samples;
    status = ht_runner_process(code, temp, &out);
    if (status == 0u) {
        return HT_LINE_DONE;
    }
    ++ht_runner.outputs;
    return ht_runner_print(out, status) == EOF ? HT_LINE_WRITE_ERROR : HT_LINE_DONE;
}

/* As many empty timed intervals as samples: the overhead inside ht_runner.ticks. */
static void ht_runner_time_empty(void)
{
#ifdef HT_HAVE_CYCLES
    unsigned long i;

    for (i = 0u; i < ht_runner.samples; ++i) {
        uint64_t t0 = ht_cycles_read();
        uint64_t t1 = ht_cycles_read();
        ht_runner.empty_ticks += t1 - t0;
    }
#endif
}

int main(void)
{
    unsigned long lineno = 0u;

#ifdef HT_HAVE_CYCLES
    ht_cycles_start();
#endif
    if (setvbuf(stdin, ht_runner.in_buffer, _IOFBF, sizeof ht_runner.in_buffer) != 0
        || setvbuf(stdout, ht_runner.out_buffer, _IOFBF, sizeof ht_runner.out_buffer) != 0) {
        fputs("ht_runner: cannot set stdio buffers\n", stderr);
        return HT_RUNNER_IO_ERROR;
    }
    ht_pipeline_init(&ht_runner.pipeline);
    while (fgets(ht_runner.line, (int)sizeof ht_runner.line, stdin) != NULL) {
        size_t n = strlen(ht_runner.line);
        ht_line_t result;

        ++lineno;
        if (n > 0u && ht_runner.line[n - 1u] == '\n') {
            ht_runner.line[--n] = '\0';
        } else if (!feof(stdin)) {
            fprintf(stderr, "ht_runner: line %lu: longer than %u characters\n", lineno,
                    HT_RUNNER_LINE - 1u);
            return HT_RUNNER_BAD_INPUT;
        }
        if (strncmp(ht_runner.line, "cal", 3) == 0) {
            result = ht_runner_cal(&ht_runner.line[3]);
        } else {
            result = ht_runner_sample(ht_runner.line);
        }
        if (result == HT_LINE_WRITE_ERROR) {
            return HT_RUNNER_IO_ERROR;
        }
        if (result == HT_LINE_MALFORMED) {
            fprintf(stderr, "ht_runner: line %lu: expected \"<code> [<temp_centi>]\" or "
                    "\"cal <hex>\"\n", lineno);
            return HT_RUNNER_BAD_INPUT;
        }
    }
    if (ferror(stdin) || fflush(stdout) != 0) {
        fputs("ht_runner: read or write error\n", stderr);
        return HT_RUNNER_IO_ERROR;
    }
    ht_runner_time_empty();
#ifdef HT_HAVE_CYCLES
    fprintf(stderr, "ht_runner: samples %lu outputs %lu ticks %llu empty_ticks %llu\n",
            ht_runner.samples, ht_runner.outputs, (unsigned long long)ht_runner.ticks,
            (unsigned long long)ht_runner.empty_ticks);
#else
    fprintf(stderr, "ht_runner: samples %lu outputs %lu\n", ht_runner.samples,
            ht_runner.outputs);
#endif
    return HT_RUNNER_OK;
}
