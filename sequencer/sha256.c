/* sha256: SHA-256 of bytes and of files (FIPS 180-4, section 6.2), for the
 * journal's record hashes and the plan's and rig's fingerprints; whole
 * blocks straight from the caller's bytes, with the x86 SHA extensions
 * where the processor has them. Not a cryptographic toolkit: no HMAC, no
 * other digests, no constant-time guarantees; it only names bytes exactly. */
#include "store.h"

#include <errno.h>
#include <fcntl.h>
#include <pthread.h>
#include <string.h>
#include <unistd.h>
#if defined(__x86_64__) || defined(__i386__)
#include <cpuid.h>
#include <immintrin.h>
#define SHA256_X86 1
#endif

typedef struct {
    uint32_t h[8];
    uint64_t length;            /* bytes hashed so far */
    unsigned char block[64];
    size_t used;                /* bytes waiting in block */
} sha256_state;

/* FIPS 180-4, 4.2.2: the first 32 bits of the fractional parts of the cube
 * roots of the first 64 primes. */
static const uint32_t K[64] = {
    0x428a2f98, 0x71374491, 0xb5c0fbcf, 0xe9b5dba5, 0x3956c25b, 0x59f111f1, 0x923f82a4,
    0xab1c5ed5, 0xd807aa98, 0x12835b01, 0x243185be, 0x550c7dc3, 0x72be5d74, 0x80deb1fe,
    0x9bdc06a7, 0xc19bf174, 0xe49b69c1, 0xefbe4786, 0x0fc19dc6, 0x240ca1cc, 0x2de92c6f,
    0x4a7484aa, 0x5cb0a9dc, 0x76f988da, 0x983e5152, 0xa831c66d, 0xb00327c8, 0xbf597fc7,
    0xc6e00bf3, 0xd5a79147, 0x06ca6351, 0x14292967, 0x27b70a85, 0x2e1b2138, 0x4d2c6dfc,
    0x53380d13, 0x650a7354, 0x766a0abb, 0x81c2c92e, 0x92722c85, 0xa2bfe8a1, 0xa81a664b,
    0xc24b8b70, 0xc76c51a3, 0xd192e819, 0xd6990624, 0xf40e3585, 0x106aa070, 0x19a4c116,
    0x1e376c08, 0x2748774c, 0x34b0bcb5, 0x391c0cb3, 0x4ed8aa4a, 0x5b9cca4f, 0x682e6ff3,
    0x748f82ee, 0x78a5636f, 0x84c87814, 0x8cc70208, 0x90befffa, 0xa4506ceb, 0xbef9a3f7,
    0xc67178f2};

#define ROTR(x, n) (((x) >> (n)) | ((x) << (32 - (n))))

static void sha256_init(sha256_state *st) {
    /* FIPS 180-4, 5.3.3: square roots of the first 8 primes. */
    static const uint32_t H0[8] = {0x6a09e667, 0xbb67ae85, 0x3c6ef372, 0xa54ff53a,
                                   0x510e527f, 0x9b05688c, 0x1f83d9ab, 0x5be0cd19};
    memcpy(st->h, H0, sizeof H0);
    st->length = 0;
    st->used = 0;
}

static uint32_t load_be32(const unsigned char *p) {
    return (uint32_t)p[0] << 24 | (uint32_t)p[1] << 16 | (uint32_t)p[2] << 8 | (uint32_t)p[3];
}

/* FIPS 180-4, 6.2.2: one 512-bit block. */
static void sha256_block(uint32_t h[8], const unsigned char *p) {
    uint32_t w[64];
    for (int t = 0; t < 16; t++) w[t] = load_be32(p + 4 * t);
    for (int t = 16; t < 64; t++) {
        uint32_t s0 = ROTR(w[t - 15], 7) ^ ROTR(w[t - 15], 18) ^ (w[t - 15] >> 3);
        uint32_t s1 = ROTR(w[t - 2], 17) ^ ROTR(w[t - 2], 19) ^ (w[t - 2] >> 10);
        w[t] = w[t - 16] + s0 + w[t - 7] + s1;
    }
    uint32_t a = h[0], b = h[1], c = h[2], d = h[3], e = h[4], f = h[5], g = h[6], k = h[7];
    for (int t = 0; t < 64; t++) {
        uint32_t t1 = k + (ROTR(e, 6) ^ ROTR(e, 11) ^ ROTR(e, 25)) + ((e & f) ^ (~e & g)) +
                      K[t] + w[t];
        uint32_t t2 = (ROTR(a, 2) ^ ROTR(a, 13) ^ ROTR(a, 22)) + ((a & b) ^ (a & c) ^ (b & c));
        k = g;
        g = f;
        f = e;
        e = d + t1;
        d = c;
        c = b;
        b = a;
        a = t1 + t2;
    }
    h[0] += a;
    h[1] += b;
    h[2] += c;
    h[3] += d;
    h[4] += e;
    h[5] += f;
    h[6] += g;
    h[7] += k;
}

static void blocks_portable(uint32_t h[8], const unsigned char *p, size_t n) {
    for (size_t i = 0; i < n; i++) sha256_block(h, p + 64 * i);
}

#ifdef SHA256_X86
/* Rounds 4i .. 4i+3 with the SHA extensions; w[i % 4] holds W[4i .. 4i+3],
 * and the schedule's next words are made on the way (Intel's SHA-NI use of
 * sha256msg1/msg2, as in its white paper "Intel SHA Extensions", 2013). */
__attribute__((target("sha,sse4.1"))) static void rounds4(__m128i *abef, __m128i *cdgh,
                                                         __m128i w[4], int i) {
    __m128i msg = _mm_add_epi32(w[i % 4], _mm_loadu_si128((const __m128i *)&K[4 * i]));
    *cdgh = _mm_sha256rnds2_epu32(*cdgh, *abef, msg);
    if (i >= 3 && i <= 14) {
        __m128i next = _mm_add_epi32(w[(i + 1) % 4], _mm_alignr_epi8(w[i % 4], w[(i + 3) % 4], 4));
        w[(i + 1) % 4] = _mm_sha256msg2_epu32(next, w[i % 4]);
    }
    *abef = _mm_sha256rnds2_epu32(*abef, *cdgh, _mm_shuffle_epi32(msg, 0x0E));
    if (i >= 1 && i <= 12) w[(i + 3) % 4] = _mm_sha256msg1_epu32(w[(i + 3) % 4], w[i % 4]);
}

__attribute__((target("sha,sse4.1"))) static void blocks_x86(uint32_t h[8],
                                                            const unsigned char *p, size_t n) {
    const __m128i swap = _mm_set_epi64x(0x0c0d0e0f08090a0bLL, 0x0405060700010203LL);
    __m128i dcba = _mm_shuffle_epi32(_mm_loadu_si128((const __m128i *)&h[0]), 0xB1);
    __m128i hgfe = _mm_shuffle_epi32(_mm_loadu_si128((const __m128i *)&h[4]), 0x1B);
    __m128i abef = _mm_alignr_epi8(dcba, hgfe, 8), cdgh = _mm_blend_epi16(hgfe, dcba, 0xF0);
    for (size_t b = 0; b < n; b++, p += 64) {
        __m128i abef0 = abef, cdgh0 = cdgh, w[4];
        for (int i = 0; i < 4; i++)
            w[i] = _mm_shuffle_epi8(_mm_loadu_si128((const __m128i *)(p + 16 * i)), swap);
        for (int i = 0; i < 16; i++) rounds4(&abef, &cdgh, w, i);
        abef = _mm_add_epi32(abef, abef0);
        cdgh = _mm_add_epi32(cdgh, cdgh0);
    }
    __m128i feba = _mm_shuffle_epi32(abef, 0x1B), dchg = _mm_shuffle_epi32(cdgh, 0xB1);
    _mm_storeu_si128((__m128i *)&h[0], _mm_blend_epi16(feba, dchg, 0xF0));
    _mm_storeu_si128((__m128i *)&h[4], _mm_alignr_epi8(dchg, feba, 8));
}
#endif

/* n whole blocks from p: with the SHA extensions when CPUID says they and
 * SSE4.1 are there, else portably. Chosen once per process. */
static void (*blocks)(uint32_t h[8], const unsigned char *p, size_t n) = blocks_portable;
static pthread_once_t blocks_once = PTHREAD_ONCE_INIT;

static void choose_blocks(void) {
#ifdef SHA256_X86
    unsigned a, b, c, d;
    bool sse41 = __get_cpuid(1, &a, &b, &c, &d) && (c & (1u << 19)) && (c & (1u << 9));
    if (sse41 && __get_cpuid_count(7, 0, &a, &b, &c, &d) && (b & (1u << 29))) blocks = blocks_x86;
#endif
}

static void sha256_update(sha256_state *st, const unsigned char *p, size_t len) {
    pthread_once(&blocks_once, choose_blocks);
    st->length += len;
    if (st->used > 0) {
        size_t take = 64 - st->used < len ? 64 - st->used : len;
        if (take) memcpy(st->block + st->used, p, take);
        st->used += take;
        p += take;
        len -= take;
        if (st->used < 64) return;
        blocks(st->h, st->block, 1);
        st->used = 0;
    }
    if (len >= 64) blocks(st->h, p, len / 64);     /* straight from the caller's bytes */
    p += len / 64 * 64;
    len %= 64;
    if (len) memcpy(st->block, p, len);
    st->used = len;
}

/* FIPS 180-4, 5.1.1: a 1 bit, zeros to 448 mod 512, the length in bits. */
static void sha256_final(sha256_state *st, char out[65]) {
    uint64_t bits = st->length * 8;
    unsigned char pad[72] = {0x80};
    size_t npad = (st->used < 56 ? 56 : 120) - st->used;
    for (int i = 0; i < 8; i++) pad[npad + (size_t)i] = (unsigned char)(bits >> (56 - 8 * i));
    sha256_update(st, pad, npad + 8);
    static const char hex[] = "0123456789abcdef";
    for (int i = 0; i < 32; i++) {
        unsigned byte = (st->h[i / 4] >> (24 - 8 * (i % 4))) & 0xff;
        out[2 * i] = hex[byte >> 4];
        out[2 * i + 1] = hex[byte & 15];
    }
    out[64] = '\0';
}

void store_sha256_hex(const void *bytes, size_t len, char out[65]) {
    sha256_state st;
    sha256_init(&st);
    sha256_update(&st, bytes, len);
    sha256_final(&st, out);
}

/* Returns 0, or -1 with errno set (the file could not be opened or read). */
int store_sha256_file(const char *path, char out[65]) {
    int fd = open(path, O_RDONLY | O_CLOEXEC);
    if (fd < 0) return -1;
    sha256_state st;
    sha256_init(&st);
    unsigned char buf[65536];
    for (;;) {
        ssize_t got = read(fd, buf, sizeof buf);
        if (got < 0 && errno == EINTR) continue;
        if (got < 0) {
            int saved = errno;
            close(fd);
            errno = saved;
            return -1;
        }
        if (got == 0) break;
        sha256_update(&st, buf, (size_t)got);
    }
    close(fd);
    sha256_final(&st, out);
    return 0;
}
