/*
 * ht_crc32.h - CRC-32/ISO-HDLC (the CRC of zlib, PNG, Ethernet and gzip).
 *
 * Parameters (CRC RevEng catalogue, CRC-32/ISO-HDLC): width 32, polynomial
 * 0x04C11DB7 processed reflected (0xEDB88320), initial value 0xFFFFFFFF,
 * input and output reflected, final XOR 0xFFFFFFFF, check value 0xCBF43926
 * for the nine ASCII bytes "123456789".
 *
 * The API composes like zlib's crc32(crc, buf, len): the value passed in and
 * returned is always a finished CRC (final XOR applied), the CRC of no bytes
 * is 0, and
 *
 *     ht_crc32_update(ht_crc32_update(0u, a, la), b, lb)
 *
 * equals the CRC of the concatenation a || b. A message can therefore be fed
 * in pieces of any size (including zero) without a separate init/final step.
 *
 * Table driven, one byte per step, with a const 256-entry table (1 KiB in
 * read-only memory). No state, no allocation, reentrant.
 */
#ifndef HT_CRC32_H
#define HT_CRC32_H

#include <stddef.h>
#include <stdint.h>

#include "ht_common.h"

/* CRC of the empty message; the value to start an incremental computation. */
#define HT_CRC32_EMPTY 0x00000000u

/* Catalogue check value: CRC of the ASCII bytes "123456789". */
#define HT_CRC32_CHECK 0xCBF43926u

/*
 * Extend a finished CRC-32 `crc` (HT_CRC32_EMPTY to start) over `len` bytes
 * at `data` and return the finished CRC of the whole message so far.
 * `data` may be NULL only when `len` is 0.
 */
HT_MUST_USE uint32_t ht_crc32_update(uint32_t crc, const uint8_t *data, size_t len);

#endif /* HT_CRC32_H */
