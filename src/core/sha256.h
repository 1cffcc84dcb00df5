/* SHA-256 message digest (NIST FIPS 180-4, Secure Hash Standard, 2015, sections 4.1.2, 4.2.2,
 * 5.1.1, 5.3.3, 6.2). Used for the input-file hashes in the provenance record of fits.json. */
#ifndef BL_SHA256_H
#define BL_SHA256_H

#include "bandlink/status.h"

#include <stddef.h>
#include <stdint.h>

enum { BL_SHA256_DIGEST_SIZE = 32, BL_SHA256_HEX_SIZE = 65 /* 64 hex digits + NUL */ };

typedef struct {
    uint32_t state[8];
    uint64_t length;         /* bytes hashed so far */
    unsigned char block[64]; /* pending partial block */
    size_t used;             /* bytes in block */
} bl_sha256;

void bl_sha256_init(bl_sha256 *ctx);
void bl_sha256_update(bl_sha256 *ctx, const void *data, size_t size);
/* Finish and write the 32-byte digest; the context must be re-initialised before reuse. */
void bl_sha256_final(bl_sha256 *ctx, unsigned char digest[BL_SHA256_DIGEST_SIZE]);
/* Digest of a buffer as 64 lowercase hex digits. */
void bl_sha256_hex(const void *data, size_t size, char hex[BL_SHA256_HEX_SIZE]);
/* Digest of a whole file as 64 lowercase hex digits; BL_ERR_IO naming the file when it cannot be read. */
bl_status bl_sha256_file(const char *path, char hex[BL_SHA256_HEX_SIZE], bl_error *err);

#endif
