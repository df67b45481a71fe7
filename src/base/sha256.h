/* SHA-256 (FIPS 180-4), for content hashes of scenes and referenced files. */
#ifndef BRM_SHA256_H
#define BRM_SHA256_H

#include <stddef.h>
#include <stdint.h>

typedef struct brm_sha256 {
    uint32_t h[8];
    uint64_t len;
    uint8_t buf[64];
    size_t fill;
} brm_sha256;

void brm_sha256_init(brm_sha256 *c);
void brm_sha256_update(brm_sha256 *c, const void *data, size_t n);
void brm_sha256_final(brm_sha256 *c, uint8_t out[32]);
void brm_sha256_buf(const void *data, size_t n, uint8_t out[32]);
/* 64 lowercase hex digits and a NUL. */
void brm_sha256_hex(const uint8_t digest[32], char out[65]);

#endif
