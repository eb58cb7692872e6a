/* SHA-256 as specified in FIPS 180-4, section 6.2. */
#include "sha256.h"

#include <string.h>

#if defined(__x86_64__) && defined(__GNUC__)
#include <cpuid.h>
#include <immintrin.h>
#define PM_SHA_NI 1
#endif

static const uint32_t K[64] = {
    0x428a2f98, 0x71374491, 0xb5c0fbcf, 0xe9b5dba5, 0x3956c25b, 0x59f111f1, 0x923f82a4, 0xab1c5ed5,
    0xd807aa98, 0x12835b01, 0x243185be, 0x550c7dc3, 0x72be5d74, 0x80deb1fe, 0x9bdc06a7, 0xc19bf174,
    0xe49b69c1, 0xefbe4786, 0x0fc19dc6, 0x240ca1cc, 0x2de92c6f, 0x4a7484aa, 0x5cb0a9dc, 0x76f988da,
    0x983e5152, 0xa831c66d, 0xb00327c8, 0xbf597fc7, 0xc6e00bf3, 0xd5a79147, 0x06ca6351, 0x14292967,
    0x27b70a85, 0x2e1b2138, 0x4d2c6dfc, 0x53380d13, 0x650a7354, 0x766a0abb, 0x81c2c92e, 0x92722c85,
    0xa2bfe8a1, 0xa81a664b, 0xc24b8b70, 0xc76c51a3, 0xd192e819, 0xd6990624, 0xf40e3585, 0x106aa070,
    0x19a4c116, 0x1e376c08, 0x2748774c, 0x34b0bcb5, 0x391c0cb3, 0x4ed8aa4a, 0x5b9cca4f, 0x682e6ff3,
    0x748f82ee, 0x78a5636f, 0x84c87814, 0x8cc70208, 0x90befffa, 0xa4506ceb, 0xbef9a3f7, 0xc67178f2};

#define ROR(x, n) (((x) >> (n)) | ((x) << (32 - (n))))

static void block(pm_i_sha256 *s, const unsigned char *p) {
    uint32_t w[64];
    for (int i = 0; i < 16; i++) {
        w[i] = (uint32_t)p[4 * i] << 24 | (uint32_t)p[4 * i + 1] << 16 |
               (uint32_t)p[4 * i + 2] << 8 | (uint32_t)p[4 * i + 3];
    }
    for (int i = 16; i < 64; i++) {
        uint32_t s0 = ROR(w[i - 15], 7) ^ ROR(w[i - 15], 18) ^ (w[i - 15] >> 3);
        uint32_t s1 = ROR(w[i - 2], 17) ^ ROR(w[i - 2], 19) ^ (w[i - 2] >> 10);
        w[i] = w[i - 16] + s0 + w[i - 7] + s1;
    }
    uint32_t a = s->h[0], b = s->h[1], c = s->h[2], d = s->h[3], e = s->h[4], f = s->h[5],
             g = s->h[6], h = s->h[7];
    for (int i = 0; i < 64; i++) {
        uint32_t S1 = ROR(e, 6) ^ ROR(e, 11) ^ ROR(e, 25);
        uint32_t ch = (e & f) ^ (~e & g);
        uint32_t t1 = h + S1 + ch + K[i] + w[i];
        uint32_t S0 = ROR(a, 2) ^ ROR(a, 13) ^ ROR(a, 22);
        uint32_t mj = (a & b) ^ (a & c) ^ (b & c);
        uint32_t t2 = S0 + mj;
        h = g;
        g = f;
        f = e;
        e = d + t1;
        d = c;
        c = b;
        b = a;
        a = t1 + t2;
    }
    s->h[0] += a;
    s->h[1] += b;
    s->h[2] += c;
    s->h[3] += d;
    s->h[4] += e;
    s->h[5] += f;
    s->h[6] += g;
    s->h[7] += h;
}

#ifdef PM_SHA_NI
/* The same compression with the x86 SHA extensions (Intel SHA-NI), used when the CPU has
 * them: four rounds per step, the message schedule by sha256msg1/msg2. */
__attribute__((target("sha,sse4.1"))) static void blocks_ni(uint32_t st[8], const unsigned char *p,
                                                            size_t nblocks) {
    const __m128i MASK = _mm_set_epi64x(0x0c0d0e0f08090a0bULL, 0x0405060700010203ULL);
    __m128i tmp = _mm_loadu_si128((const __m128i *)(const void *)&st[0]);
    __m128i s1 = _mm_loadu_si128((const __m128i *)(const void *)&st[4]);
    tmp = _mm_shuffle_epi32(tmp, 0xB1);
    s1 = _mm_shuffle_epi32(s1, 0x1B);
    __m128i s0 = _mm_alignr_epi8(tmp, s1, 8);
    s1 = _mm_blend_epi16(s1, tmp, 0xF0);
    while (nblocks--) {
        __m128i save0 = s0, save1 = s1, w[16];
        for (int i = 0; i < 16; i++) {
            if (i < 4) {
                w[i] = _mm_shuffle_epi8(
                    _mm_loadu_si128((const __m128i *)(const void *)(p + 16 * i)), MASK);
            } else {
                __m128i m = _mm_sha256msg1_epu32(w[i - 4], w[i - 3]);
                m = _mm_add_epi32(m, _mm_alignr_epi8(w[i - 1], w[i - 2], 4));
                w[i] = _mm_sha256msg2_epu32(m, w[i - 1]);
            }
            __m128i msg =
                _mm_add_epi32(w[i], _mm_loadu_si128((const __m128i *)(const void *)&K[4 * i]));
            s1 = _mm_sha256rnds2_epu32(s1, s0, msg);
            msg = _mm_shuffle_epi32(msg, 0x0E);
            s0 = _mm_sha256rnds2_epu32(s0, s1, msg);
        }
        s0 = _mm_add_epi32(s0, save0);
        s1 = _mm_add_epi32(s1, save1);
        p += 64;
    }
    tmp = _mm_shuffle_epi32(s0, 0x1B);
    s1 = _mm_shuffle_epi32(s1, 0xB1);
    s0 = _mm_blend_epi16(tmp, s1, 0xF0);
    s1 = _mm_alignr_epi8(s1, tmp, 8);
    _mm_storeu_si128((__m128i *)(void *)&st[0], s0);
    _mm_storeu_si128((__m128i *)(void *)&st[4], s1);
}

static int have_ni(void) {
    static int cached = -1; /* a pure function of the CPU: racing writers store the same value */
    if (cached < 0) {
        unsigned a, b, c, d;
        int ok = 0;
        if (__get_cpuid_count(7, 0, &a, &b, &c, &d)) {
            ok = (b >> 29) & 1; /* SHA */
            unsigned a1, b1, c1, d1;
            if (ok && __get_cpuid(1, &a1, &b1, &c1, &d1)) {
                ok = (c1 >> 19) & 1; /* SSE4.1 */
            } else {
                ok = 0;
            }
        }
        cached = ok;
    }
    return cached;
}
#endif

static void blocks(pm_i_sha256 *s, const unsigned char *p, size_t n) {
#ifdef PM_SHA_NI
    if (have_ni()) {
        blocks_ni(s->h, p, n);
        return;
    }
#endif
    for (size_t i = 0; i < n; i++) {
        block(s, p + 64 * i);
    }
}

void pm_i_sha256_init(pm_i_sha256 *s) {
    static const uint32_t h0[8] = {0x6a09e667, 0xbb67ae85, 0x3c6ef372, 0xa54ff53a,
                                   0x510e527f, 0x9b05688c, 0x1f83d9ab, 0x5be0cd19};
    memcpy(s->h, h0, sizeof h0);
    s->len = 0;
    s->n = 0;
}

void pm_i_sha256_update(pm_i_sha256 *s, const void *data, size_t len) {
    const unsigned char *p = data;
    s->len += len;
    if (s->n) {
        size_t take = 64 - s->n < len ? 64 - s->n : len;
        memcpy(s->buf + s->n, p, take);
        s->n += take;
        p += take;
        len -= take;
        if (s->n == 64) {
            blocks(s, s->buf, 1);
            s->n = 0;
        }
    }
    if (len >= 64) {
        size_t nb = len / 64;
        blocks(s, p, nb);
        p += nb * 64;
        len -= nb * 64;
    }
    if (len) {
        memcpy(s->buf, p, len);
        s->n = len;
    }
}

void pm_i_sha256_final(pm_i_sha256 *s, unsigned char out[32]) {
    uint64_t bits = s->len * 8;
    unsigned char pad = 0x80;
    pm_i_sha256_update(s, &pad, 1);
    unsigned char z = 0;
    while (s->n != 56) {
        pm_i_sha256_update(s, &z, 1);
    }
    unsigned char l[8];
    for (int i = 0; i < 8; i++) {
        l[i] = (unsigned char)(bits >> (56 - 8 * i));
    }
    pm_i_sha256_update(s, l, 8);
    for (int i = 0; i < 8; i++) {
        out[4 * i] = (unsigned char)(s->h[i] >> 24);
        out[4 * i + 1] = (unsigned char)(s->h[i] >> 16);
        out[4 * i + 2] = (unsigned char)(s->h[i] >> 8);
        out[4 * i + 3] = (unsigned char)s->h[i];
    }
}
