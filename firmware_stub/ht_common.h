/*
 * ht_common.h - small definitions shared by the reference firmware's modules and runners.
 *
 * HT_MUST_USE marks a function whose result must be checked (warn_unused_result where the
 * compiler has it); ht_hex_value() decodes one hexadecimal digit for the runners' line
 * parsers.
 */
#ifndef HT_COMMON_H
#define HT_COMMON_H

/* Marks a function whose result must be used, where the compiler supports it. */
#ifndef HT_MUST_USE
#if defined(__GNUC__) || defined(__clang__)
#define HT_MUST_USE __attribute__((warn_unused_result))
#else
#define HT_MUST_USE
#endif
#endif

/* Value of one hex digit (0-9, a-f, A-F), or -1 if `c` is not one. */
static inline int ht_hex_value(char c)
{
    if (c >= '0' && c <= '9') {
        return c - '0';
    }
    if (c >= 'a' && c <= 'f') {
        return c - 'a' + 10;
    }
    if (c >= 'A' && c <= 'F') {
        return c - 'A' + 10;
    }
    return -1;
}

#endif /* HT_COMMON_H */
