/*
 * c_baseline: the plain single-threaded C loop that hashaudit's bucket checks are measured against.
 *
 * Usage:
 *   c_baseline FILE BUCKETS [BLOCK_BYTES]
 *       Hash every line of FILE with MurmurHash3 x86_32 (seed 0), count hash & (BUCKETS - 1) for BUCKETS a power
 *       of two, and print one line of JSON: the number of keys, Pearson's chi-square statistic of the counts
 *       against the uniform expectation, and the elapsed seconds (reading included).
 *   c_baseline --dump N FILE [BLOCK_BYTES]
 *       Print the hashes of the first N lines of FILE, unsigned decimal, one a line (to check the hash).
 *
 * A key is the bytes of a '\n'-terminated line without the '\n' (an empty line is an empty key); the last line may
 * lack its '\n'. FILE is read with fread in blocks of BLOCK_BYTES (default 16 MiB); a line that straddles two blocks
 * is carried over, and a line longer than the buffer grows it. A small BLOCK_BYTES exercises both paths.
 *
 * Build: cc -O2 -Wall -Wextra -o c_baseline c_baseline.c
 *
 * References:
 *   Austin Appleby, MurmurHash3 (2011), public domain: the x86_32 variant.
 *   K. Pearson (1900), "On the criterion that a given system of deviations from the probable ...",
 *   Philosophical Magazine 50(302), 157-175: the chi-square statistic sum((observed - expected)^2 / expected).
 */

#define _POSIX_C_SOURCE 199309L

#include <errno.h>
#include <inttypes.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#define DEFAULT_BLOCK_BYTES ((size_t)16 << 20)

static uint32_t rotl32(uint32_t x, int r) { return (x << r) | (x >> (32 - r)); }

/* Read as little-endian whatever the host's byte order, as the published algorithm specifies. */
static uint32_t load_le32(const unsigned char *p)
{
    return (uint32_t)p[0] | (uint32_t)p[1] << 8 | (uint32_t)p[2] << 16 | (uint32_t)p[3] << 24;
}

static uint32_t fmix32(uint32_t h)
{
    h ^= h >> 16;
    h *= 0x85ebca6bu;
    h ^= h >> 13;
    h *= 0xc2b2ae35u;
    h ^= h >> 16;
    return h;
}

static uint32_t murmur3_x86_32(const unsigned char *key, size_t len, uint32_t seed)
{
    const uint32_t c1 = 0xcc9e2d51u;
    const uint32_t c2 = 0x1b873593u;
    const size_t nblocks = len / 4;
    uint32_t h = seed;
    uint32_t k;

    for (size_t i = 0; i < nblocks; i++) {
        k = load_le32(key + 4 * i);
        k *= c1;
        k = rotl32(k, 15);
        k *= c2;
        h ^= k;
        h = rotl32(h, 13);
        h = h * 5 + 0xe6546b64u;
    }

    const unsigned char *tail = key + 4 * nblocks;
    k = 0;
    switch (len & 3) {
    case 3:
        k ^= (uint32_t)tail[2] << 16;
        /* fall through */
    case 2:
        k ^= (uint32_t)tail[1] << 8;
        /* fall through */
    case 1:
        k ^= (uint32_t)tail[0];
        k *= c1;
        k = rotl32(k, 15);
        k *= c2;
        h ^= k;
    }

    h ^= (uint32_t)len; /* the published algorithm mixes in the length modulo 2^32 */
    return fmix32(h);
}

struct sink {
    uint64_t *bucket_counts; /* NULL in --dump mode */
    uint32_t mask;
    uint64_t keys;
    uint64_t dump_left;
};

/* One key; returns 0 when no more keys are wanted. */
static inline int take_key(struct sink *s, const unsigned char *key, size_t len)
{
    uint32_t h = murmur3_x86_32(key, len, 0);
    s->keys++;
    if (s->bucket_counts != NULL) {
        s->bucket_counts[h & s->mask]++;
        return 1;
    }
    printf("%" PRIu32 "\n", h);
    return --s->dump_left > 0;
}

/* Feed every line of f to the sink; returns 0 on success. */
static int scan_lines(FILE *f, size_t block_bytes, struct sink *s)
{
    size_t capacity = block_bytes;
    size_t carried = 0; /* bytes of an unfinished line kept at the start of buffer */
    unsigned char *buffer = malloc(capacity);
    if (buffer == NULL) {
        fprintf(stderr, "c_baseline: cannot allocate %zu bytes\n", capacity);
        return -1;
    }
    if (s->bucket_counts == NULL && s->dump_left == 0)
        goto done;

    for (;;) {
        if (carried == capacity) {
            unsigned char *grown = realloc(buffer, capacity * 2);
            if (grown == NULL) {
                fprintf(stderr, "c_baseline: cannot allocate %zu bytes for a long line\n", capacity * 2);
                free(buffer);
                return -1;
            }
            buffer = grown;
            capacity *= 2;
        }
        size_t got = fread(buffer + carried, 1, capacity - carried, f);
        if (got == 0) {
            if (ferror(f)) {
                fprintf(stderr, "c_baseline: read error: %s\n", strerror(errno));
                free(buffer);
                return -1;
            }
            break;
        }
        const unsigned char *line = buffer;
        const unsigned char *end = buffer + carried + got;
        const unsigned char *newline;
        while ((newline = memchr(line, '\n', (size_t)(end - line))) != NULL) {
            if (!take_key(s, line, (size_t)(newline - line)))
                goto done;
            line = newline + 1;
        }
        carried = (size_t)(end - line);
        memmove(buffer, line, carried);
    }
    if (carried > 0) /* a last line without '\n' */
        take_key(s, buffer, carried);
done:
    free(buffer);
    return 0;
}

static double pearson_chi_square(const uint64_t *bucket_counts, uint64_t buckets, uint64_t keys)
{
    const long double expected = (long double)keys / (long double)buckets;
    long double sum = 0.0L;
    for (uint64_t i = 0; i < buckets; i++) {
        long double deviation = (long double)bucket_counts[i] - expected;
        sum += deviation * deviation;
    }
    return (double)(sum / expected);
}

static int parse_count(const char *text, uint64_t *value)
{
    char *end;
    errno = 0;
    unsigned long long parsed = strtoull(text, &end, 10);
    if (errno != 0 || end == text || *end != '\0' || text[0] == '-')
        return -1;
    *value = (uint64_t)parsed;
    return 0;
}

static double seconds_since(const struct timespec *start)
{
    struct timespec now;
    clock_gettime(CLOCK_MONOTONIC, &now);
    return (double)(now.tv_sec - start->tv_sec) + (double)(now.tv_nsec - start->tv_nsec) * 1e-9;
}

static int usage(void)
{
    fprintf(stderr,
            "usage: c_baseline FILE BUCKETS [BLOCK_BYTES]\n"
            "       c_baseline --dump N FILE [BLOCK_BYTES]\n"
            "BUCKETS is a power of two up to 2^32; BLOCK_BYTES defaults to 16 MiB.\n");
    return 2;
}

int main(int argc, char **argv)
{
    struct timespec start;
    clock_gettime(CLOCK_MONOTONIC, &start);

    int dump = argc >= 2 && strcmp(argv[1], "--dump") == 0;
    int first = dump ? 2 : 1; /* index of the first positional argument after --dump N */
    if (argc < first + 2 || argc > first + 3)
        return usage();

    const char *path;
    uint64_t number; /* BUCKETS, or N with --dump */
    if (dump) {
        path = argv[first + 1];
        if (parse_count(argv[first], &number) != 0) {
            fprintf(stderr, "c_baseline: N must be a non-negative integer, got '%s'\n", argv[first]);
            return 2;
        }
    } else {
        path = argv[first];
        if (parse_count(argv[first + 1], &number) != 0 || number == 0 || (number & (number - 1)) != 0 ||
            number > ((uint64_t)1 << 32)) {
            fprintf(stderr, "c_baseline: BUCKETS must be a power of two from 1 to 2^32, got '%s'\n", argv[first + 1]);
            return 2;
        }
    }
    uint64_t block_bytes = DEFAULT_BLOCK_BYTES;
    if (argc == first + 3 && (parse_count(argv[first + 2], &block_bytes) != 0 || block_bytes == 0)) {
        fprintf(stderr, "c_baseline: BLOCK_BYTES must be a positive integer, got '%s'\n", argv[first + 2]);
        return 2;
    }

    FILE *f = fopen(path, "rb");
    if (f == NULL) {
        fprintf(stderr, "c_baseline: cannot open '%s': %s\n", path, strerror(errno));
        return 1;
    }

    struct sink s = {NULL, 0, 0, 0};
    if (dump) {
        s.dump_left = number;
    } else {
        s.bucket_counts = calloc((size_t)number, sizeof *s.bucket_counts);
        if (s.bucket_counts == NULL) {
            fprintf(stderr, "c_baseline: cannot allocate %" PRIu64 " bucket counts\n", number);
            fclose(f);
            return 1;
        }
        s.mask = (uint32_t)(number - 1);
    }

    int failed = scan_lines(f, (size_t)block_bytes, &s);
    fclose(f);
    if (failed) {
        free(s.bucket_counts);
        return 1;
    }
    if (!dump) {
        double chi_square = s.keys > 0 ? pearson_chi_square(s.bucket_counts, number, s.keys) : 0.0;
        double seconds = seconds_since(&start);
        printf("{\"keys\": %" PRIu64 ", \"buckets\": %" PRIu64 ", \"chi_square\": %.17g, \"seconds\": %.6f}\n", s.keys,
               number, chi_square, seconds);
        free(s.bucket_counts);
    }
    return 0;
}
