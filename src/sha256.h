/* SHA-256 (FIPS 180-4), streamed, for the input digest recorded in run.json. */
#ifndef PM_SHA256_H
#define PM_SHA256_H
#include <stddef.h>
#include <stdint.h>
typedef struct {
    uint32_t h[8];
    uint64_t len;
    unsigned char buf[64];
    size_t n;
} pm_i_sha256;
void pm_i_sha256_init(pm_i_sha256 *s);
void pm_i_sha256_update(pm_i_sha256 *s, const void *data, size_t len);
void pm_i_sha256_final(pm_i_sha256 *s, unsigned char out[32]);
#endif
