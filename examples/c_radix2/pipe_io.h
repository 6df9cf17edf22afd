/*
 * pipe_io.h - the I/O of fftgauge's pipe protocol (docs/external-backends.md), shared by the
 * example servers (radix2_server.c, radix2_shaped_server.c, radix2_q15_server.c,
 * radix2_q31_server.c), so each of them keeps only its transform and its own checks.
 *
 * Requests arrive on stdin and responses leave on stdout, both little-endian binary, read
 * and written byte by byte so the framing is right on any host. stdout carries the
 * protocol and nothing else: anything for a human goes to stderr.
 *
 * Include it first (it asks for POSIX clock_gettime before any system header). Every
 * function is static inline, so a server that leaves one unused gets no warning.
 */
#ifndef FFTGAUGE_PIPE_IO_H
#define FFTGAUGE_PIPE_IO_H

#ifndef _POSIX_C_SOURCE
#define _POSIX_C_SOURCE 199309L
#endif
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#define OP_HELLO 1
#define OP_TRANSFORM 2
#define OP_TRANSFORM_SHAPED 3
#define STATUS_OK 0
#define STATUS_UNSUPPORTED 1
#define STATUS_BAD_REQUEST 2
#define STATUS_FAILED 3
#define STATUS_VERSION 4
#define HEADER_BYTES 32
/* The request's precision byte: bytes per real for floats; bit 7 and bytes per part for fixed point. */
#define PRECISION_Q15 0x82
#define PRECISION_Q31 0x84

/* One request header (32 bytes: "FGRQ", version, op, kind, precision, norm, rank, count, n, payload). */
typedef struct {
    uint16_t version, op;
    uint8_t kind, precision, norm, rank;
    uint32_t count;
    uint64_t n, payload_bytes;
} request_t;

/* Returns the little-endian integer of `bytes` bytes at p. */
static inline uint64_t get_le(const unsigned char *p, int bytes)
{
    uint64_t v = 0;
    for (int i = bytes - 1; i >= 0; i--)
        v = (v << 8) | p[i];
    return v;
}

/* Writes v at p as a little-endian integer of `bytes` bytes. */
static inline void put_le(unsigned char *p, uint64_t v, int bytes)
{
    for (int i = 0; i < bytes; i++, v >>= 8)
        p[i] = (unsigned char)(v & 0xff);
}

/* Returns 1 when `bytes` bytes were read from stdin into buf, 0 at end of input. */
static inline int read_exact(void *buf, size_t bytes)
{
    return fread(buf, 1, bytes, stdin) == bytes;
}

/* Reads and drops a payload the server will not use (to stay in step); returns 0 at end of input. */
static inline int skip_payload(uint64_t bytes)
{
    for (uint64_t i = 0; i < bytes; i++)
        if (getchar() == EOF)
            return 0;
    return 1;
}

/* Reads one request header; returns 0 at end of input or on a malformed header. */
static inline int read_request(request_t *r)
{
    unsigned char h[HEADER_BYTES];
    if (!read_exact(h, sizeof h) || memcmp(h, "FGRQ", 4) != 0)
        return 0;
    r->version = (uint16_t)get_le(h + 4, 2);
    r->op = (uint16_t)get_le(h + 6, 2);
    r->kind = h[8];
    r->precision = h[9];
    r->norm = h[10];
    r->rank = h[11];
    r->count = (uint32_t)get_le(h + 12, 4);
    r->n = get_le(h + 16, 8);
    r->payload_bytes = get_le(h + 24, 8);
    return 1;
}

/* Writes one response (header of protocol `version`, then the payload) and flushes it. */
static inline void respond(int version, int status, int timed, uint64_t elapsed_ns, const void *payload,
                           uint64_t bytes)
{
    unsigned char h[HEADER_BYTES] = {0};
    memcpy(h, "FGRS", 4);
    put_le(h + 4, (uint64_t)version, 2);
    put_le(h + 6, (uint64_t)status, 2);
    put_le(h + 8, timed ? 1 : 0, 4);
    put_le(h + 16, elapsed_ns, 8);
    put_le(h + 24, bytes, 8);
    fwrite(h, 1, sizeof h, stdout);
    if (bytes)
        fwrite(payload, 1, (size_t)bytes, stdout);
    fflush(stdout);
}

/* Writes a response of `status` whose payload is the message text. */
static inline void respond_error(int version, int status, const char *message)
{
    respond(version, status, 0, 0, message, strlen(message));
}

/*
 * Answers the hello (always a version-1 response): the 16-byte record (kinds, precisions,
 * norms = backward, flags, the highest version spoken, shaped kinds, most axes, largest n)
 * then the identity text.
 */
static inline void send_hello(uint8_t kinds, uint8_t precisions, uint8_t flags, uint16_t speaks_version,
                              uint8_t shaped_kinds, uint8_t max_rank, uint64_t max_n, const char *identity)
{
    size_t text = strlen(identity);
    unsigned char *caps = calloc(16 + text, 1);
    if (caps == NULL) {
        respond_error(1, STATUS_FAILED, "out of memory");
        return;
    }
    caps[0] = kinds;
    caps[1] = precisions;
    caps[2] = 0x01;  /* norms: backward */
    caps[3] = flags;
    if (speaks_version > 1)
        put_le(caps + 4, speaks_version, 2);
    caps[6] = shaped_kinds;
    caps[7] = max_rank;
    put_le(caps + 8, max_n, 8);
    memcpy(caps + 16, identity, text);
    respond(1, STATUS_OK, 0, 0, caps, 16 + text);
    free(caps);
}

/* Returns CLOCK_MONOTONIC in nanoseconds (the servers time their transforms only). */
static inline uint64_t now_ns(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (uint64_t)t.tv_sec * 1000000000u + (uint64_t)t.tv_nsec;
}

/* Returns 1 when n is a power of two from 1 to max_n. */
static inline int is_pow2_upto(uint64_t n, uint64_t max_n)
{
    return n >= 1 && (n & (n - 1)) == 0 && n <= max_n;
}

#endif
