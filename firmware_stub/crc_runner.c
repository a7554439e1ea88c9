/*
 * crc_runner.c - CRC-32/ISO-HDLC of hex-encoded byte strings.
 *
 * Reads text from stdin, one byte string per line, each written as hex digit
 * pairs (either case, no separators, lines end in LF; an empty line is the
 * empty string). Writes for each line its CRC-32 as 8 lower-case hex digits
 * and LF. Lines of any length are accepted: a line is decoded and fed to
 * ht_crc32_update() in pieces of up to HT_CRC_RUNNER_CHUNK bytes. A malformed
 * line is reported on stderr with its number and ends the run with exit
 * status 2; a read or write error gives exit status 1.
 *
 * Builds for the host and, with target/startup.c, for Cortex-M under QEMU,
 * where stdin and stdout are semihosting calls. Each semihosting call is a
 * trap into the emulator costing about 1.5 to 3 us of host time (QEMU 7.2),
 * however many bytes it moves. newlib treats the semihosting console as a
 * terminal, so stdout is line buffered by default: one trap per output line,
 * which alone limits a run to about 400 000 lines/s. Unbuffered stdin would be
 * one trap per character. The runner therefore gives both streams large,
 * fully buffered stdio buffers with setvbuf, so a run costs one trap per
 * HT_CRC_RUNNER_IO_BUFFER bytes in each direction and the time goes into
 * emulating the program itself (measured: 200 000 lines written in 0.15 s
 * this way against 0.51 s line buffered).
 *
 * With HT_HAVE_CYCLES defined (target builds, with target/ht_cycles.c), it
 * also times every ht_crc32_update() call with the SysTick counter and writes
 * one summary line to stderr at the end:
 *     crc_runner: lines <n> bytes <n> ticks <n>
 * where ticks includes one ht_cycles_read() per call (time a file of empty
 * lines to measure that overhead).
 */
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <string.h>

#include "ht_crc32.h"
#ifdef HT_HAVE_CYCLES
#include "ht_cycles.h"
#endif

/* Most bytes decoded and passed to ht_crc32_update() at once. */
#define HT_CRC_RUNNER_CHUNK 256u

/* Size of each of the stdin and stdout buffers, in bytes. */
#define HT_CRC_RUNNER_IO_BUFFER 16384u

/* Exit statuses. */
#define HT_CRC_RUNNER_OK 0
#define HT_CRC_RUNNER_IO_ERROR 1
#define HT_CRC_RUNNER_BAD_INPUT 2

/*
 * All mutable state of the program. Static because stdio keeps using the
 * buffers after main() returns, while exit() flushes.
 */
static struct {
    char in_buffer[HT_CRC_RUNNER_IO_BUFFER];
    char out_buffer[HT_CRC_RUNNER_IO_BUFFER];
    /*
     * One piece of a line as fgets() returns it: at most 2 * CHUNK characters,
     * so a piece without LF always holds an even number of digits and no digit
     * pair is split between two pieces.
     */
    char text[2u * HT_CRC_RUNNER_CHUNK + 1u];
    uint8_t bytes[HT_CRC_RUNNER_CHUNK];
#ifdef HT_HAVE_CYCLES
    uint64_t ticks;
#endif
} ht_crc_runner_state;

/*
 * Decode `ndigits` hex digits at `text` into `out`. Returns the number of
 * bytes, or -1 if a character is not a hex digit or the count is odd.
 */
HT_MUST_USE static long ht_hex_decode(const char *text, size_t ndigits, uint8_t *out)
{
    size_t i;

    if (ndigits % 2u != 0u) {
        return -1;
    }
    for (i = 0u; i < ndigits; i += 2u) {
        int hi = ht_hex_value(text[i]);
        int lo = ht_hex_value(text[i + 1u]);
        if (hi < 0 || lo < 0) {
            return -1;
        }
        out[i / 2u] = (uint8_t)((hi << 4) | lo);
    }
    return (long)(ndigits / 2u);
}

/* Extend `crc` over `len` decoded bytes, timing the call on targets. */
HT_MUST_USE static uint32_t ht_crc_runner_update(uint32_t crc, size_t len)
{
#ifdef HT_HAVE_CYCLES
    uint64_t t0 = ht_cycles_read();
    crc = ht_crc32_update(crc, ht_crc_runner_state.bytes, len);
    ht_crc_runner_state.ticks += ht_cycles_read() - t0;
    return crc;
#else
    return ht_crc32_update(crc, ht_crc_runner_state.bytes, len);
#endif
}

int main(void)
{
    unsigned long lineno = 1u;       /* number of the line being read */
    unsigned long total_bytes = 0u;
    int line_open = 0;               /* part of a line read, its LF not yet */
    uint32_t crc = HT_CRC32_EMPTY;   /* CRC of the line so far */

#ifdef HT_HAVE_CYCLES
    ht_cycles_start();
#endif
    if (setvbuf(stdin, ht_crc_runner_state.in_buffer, _IOFBF,
                sizeof ht_crc_runner_state.in_buffer) != 0
        || setvbuf(stdout, ht_crc_runner_state.out_buffer, _IOFBF,
                   sizeof ht_crc_runner_state.out_buffer) != 0) {
        fputs("crc_runner: cannot set stdio buffers\n", stderr);
        return HT_CRC_RUNNER_IO_ERROR;
    }

    while (fgets(ht_crc_runner_state.text, (int)sizeof ht_crc_runner_state.text, stdin)
           != NULL) {
        size_t n = strlen(ht_crc_runner_state.text);
        int line_ends = n > 0u && ht_crc_runner_state.text[n - 1u] == '\n';
        long nbytes;

        if (line_ends) {
            --n;
        }
        nbytes = ht_hex_decode(ht_crc_runner_state.text, n, ht_crc_runner_state.bytes);
        if (nbytes < 0) {
            fprintf(stderr, "crc_runner: line %lu: not an even number of hex digits\n",
                    lineno);
            return HT_CRC_RUNNER_BAD_INPUT;
        }
        crc = ht_crc_runner_update(crc, (size_t)nbytes);
        total_bytes += (unsigned long)nbytes;
        line_open = !line_ends;
        if (line_ends) {
            if (printf("%08lx\n", (unsigned long)crc) < 0) {
                return HT_CRC_RUNNER_IO_ERROR;
            }
            crc = HT_CRC32_EMPTY;
            ++lineno;
        }
    }
    /* A last line without LF. */
    if (line_open && printf("%08lx\n", (unsigned long)crc) < 0) {
        return HT_CRC_RUNNER_IO_ERROR;
    }
    if (ferror(stdin) || fflush(stdout) != 0) {
        fputs("crc_runner: read or write error\n", stderr);
        return HT_CRC_RUNNER_IO_ERROR;
    }
#ifdef HT_HAVE_CYCLES
    fprintf(stderr, "crc_runner: lines %lu bytes %lu ticks %llu\n",
            lineno - (line_open ? 0u : 1u), total_bytes,
            (unsigned long long)ht_crc_runner_state.ticks);
#endif
    return HT_CRC_RUNNER_OK;
}
