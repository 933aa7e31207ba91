/* tkart.c: a C99 reader of ternkit artifacts, written from pack/FORMAT.md.
 * See tkart.h for the API and reader/c/README.md for how to build it. */
#include "tkart.h"

#include <errno.h>
#include <locale.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#ifdef TKART_WITH_ZSTD
#include <zstd.h>
#endif

#define ALIGN 64
#define PREAMBLE_LEN 64
#define TRAILER_LEN 64
#define CHUNK ((uint64_t)1 << 22)
#define ENTROPY_BLOCK_MAX 131072

/* ---- errors ------------------------------------------------------------ */

static int fail(tkart *a, int code, uint64_t off, const char *fmt, ...)
{
	va_list ap;
	a->err = code;
	a->err_offset = off;
	va_start(ap, fmt);
	vsnprintf(a->errmsg, sizeof a->errmsg, fmt, ap);
	va_end(ap);
	return code;
}

const char *tkart_class(int code)
{
	switch (code) {
	case TKART_OK: return "ok";
	case TKART_E_NOT_ARTIFACT: return "not-artifact";
	case TKART_E_VERSION: return "version";
	case TKART_E_STRUCTURE: return "structure";
	case TKART_E_MANIFEST_HASH: return "manifest-hash";
	case TKART_E_MANIFEST: return "manifest";
	case TKART_E_SECTION_HASH: return "section-hash";
	case TKART_E_PAYLOAD: return "payload";
	case TKART_E_COUNTS: return "counts";
	case TKART_E_UNSUPPORTED: return "unsupported";
	case TKART_E_ARENA: return "arena";
	case TKART_E_ARG: return "argument";
	case TKART_E_NOT_FOUND: return "not-found";
	}
	return "unknown";
}

const char *tkart_errmsg(const tkart *a) { return a->errmsg; }

const char *tkart_kind_name(int kind)
{
	switch (kind) {
	case TKART_TERNARY: return "ternary";
	case TKART_INT8: return "int8";
	case TKART_KEPT: return "kept";
	}
	return "?";
}

const char *tkart_codec_name(int codec)
{
	switch (codec) {
	case TKART_BITS2: return "bits2";
	case TKART_BASE3: return "base3";
	case TKART_ENTROPY: return "entropy";
	case TKART_RAW: return "raw";
	}
	return "?";
}

static uint64_t le64(const uint8_t *p)
{
	uint64_t v = 0;
	int i;
	for (i = 7; i >= 0; i--)
		v = v << 8 | p[i];
	return v;
}

static uint32_t le32(const uint8_t *p)
{
	return (uint32_t)p[0] | (uint32_t)p[1] << 8 | (uint32_t)p[2] << 16 | (uint32_t)p[3] << 24;
}

static int all_zero(const uint8_t *p, uint64_t n, uint64_t *at)
{
	uint64_t i;
	for (i = 0; i < n; i++)
		if (p[i]) {
			*at = i;
			return 0;
		}
	return 1;
}

/* ---- BLAKE3 --------------------------------------------------------------
 * From the BLAKE3 specification (Aumasson, Neves, O'Connor, Wilcox-O'Hearn,
 * 2020): the compression function of section 2.2, chunks of section 2.4 and
 * the tree of section 2.5, for the default 32-byte hash. */

static const uint32_t B3_IV[8] = {0x6A09E667, 0xBB67AE85, 0x3C6EF372, 0xA54FF53A,
                                  0x510E527F, 0x9B05688C, 0x1F83D9AB, 0x5BE0CD19};
static const uint8_t B3_PERM[16] = {2, 6, 3, 10, 7, 0, 4, 13, 1, 11, 12, 5, 9, 14, 15, 8};
enum { B3_CHUNK_START = 1, B3_CHUNK_END = 2, B3_PARENT = 4, B3_ROOT = 8 };

static uint32_t rotr(uint32_t x, int n) { return x >> n | x << (32 - n); }

#define B3G(a, b, c, d, x, y)                 \
	do {                                  \
		s[a] = s[a] + s[b] + (x);     \
		s[d] = rotr(s[d] ^ s[a], 16); \
		s[c] = s[c] + s[d];           \
		s[b] = rotr(s[b] ^ s[c], 12); \
		s[a] = s[a] + s[b] + (y);     \
		s[d] = rotr(s[d] ^ s[a], 8);  \
		s[c] = s[c] + s[d];           \
		s[b] = rotr(s[b] ^ s[c], 7);  \
	} while (0)

/* out[0..7] is the new chaining value (the first 8 words of the output). */
static void b3_compress(const uint32_t cv[8], const uint32_t block[16], uint64_t counter,
                        uint32_t len, uint32_t flags, uint32_t out[8])
{
	uint32_t s[16], m[16], t[16];
	int r, i;
	for (i = 0; i < 8; i++)
		s[i] = cv[i];
	for (i = 0; i < 4; i++)
		s[8 + i] = B3_IV[i];
	s[12] = (uint32_t)counter;
	s[13] = (uint32_t)(counter >> 32);
	s[14] = len;
	s[15] = flags;
	memcpy(m, block, sizeof m);
	for (r = 0; r < 7; r++) {
		B3G(0, 4, 8, 12, m[0], m[1]);
		B3G(1, 5, 9, 13, m[2], m[3]);
		B3G(2, 6, 10, 14, m[4], m[5]);
		B3G(3, 7, 11, 15, m[6], m[7]);
		B3G(0, 5, 10, 15, m[8], m[9]);
		B3G(1, 6, 11, 12, m[10], m[11]);
		B3G(2, 7, 8, 13, m[12], m[13]);
		B3G(3, 4, 9, 14, m[14], m[15]);
		for (i = 0; i < 16; i++)
			t[i] = m[B3_PERM[i]];
		memcpy(m, t, sizeof m);
	}
	for (i = 0; i < 8; i++)
		out[i] = s[i] ^ s[i + 8];
}

static void b3_words(const uint8_t *p, size_t len, uint32_t w[16])
{
	uint8_t b[64];
	int i;
	memset(b, 0, sizeof b);
	memcpy(b, p, len);
	for (i = 0; i < 16; i++)
		w[i] = le32(b + 4 * i);
}

/* A chunk of 1 to 1024 bytes (0 only for empty input): its chaining value,
 * or with root set the hash. */
static void b3_chunk(const uint8_t *p, size_t len, uint64_t counter, int root, uint32_t cv[8])
{
	uint32_t w[16], h[8];
	size_t off = 0;
	memcpy(h, B3_IV, sizeof h);
	for (;;) {
		size_t n = len - off > 64 ? 64 : len - off;
		uint32_t flags = off == 0 ? B3_CHUNK_START : 0;
		int last = off + n == len;
		if (last)
			flags |= B3_CHUNK_END | (root ? B3_ROOT : 0);
		b3_words(p + off, n, w);
		b3_compress(h, w, counter, (uint32_t)n, flags, h);
		off += n;
		if (last)
			break;
	}
	memcpy(cv, h, sizeof h);
}

static void b3_parent(const uint32_t l[8], const uint32_t r[8], uint32_t flags, uint32_t out[8])
{
	uint32_t w[16];
	memcpy(w, l, 32);
	memcpy(w + 8, r, 32);
	b3_compress(B3_IV, w, 0, 64, B3_PARENT | flags, out);
}

/* The node that len bytes (at least 1, or 0 for the empty input with root)
 * form when their first chunk is number counter0, a multiple of a power of
 * two at least as large as their chunk count: its chaining value, or with
 * root set (counter0 = 0) the hash. A piece of a section (format 1.4,
 * FORMAT.md "Hashing") is such a node. */
static void b3_tree(const uint8_t *p, size_t len, uint64_t counter0, int root, uint32_t cv[8])
{
	uint32_t stack[54][8];
	int depth = 0, i;
	uint64_t chunk = 0;
	size_t off = 0;
	if (len <= 1024) {
		b3_chunk(p, len, counter0, root, cv);
	} else {
		/* Every chunk but the last is merged into the stack as soon as the
		 * number of chunks so far allows (section 5.1.2): after chunk k
		 * (counting from 1), one merge per trailing zero bit of k. */
		while (len - off > 1024) {
			uint64_t total;
			b3_chunk(p + off, 1024, counter0 + chunk, 0, cv);
			off += 1024;
			chunk++;
			for (total = chunk; (total & 1) == 0; total >>= 1)
				b3_parent(stack[--depth], cv, 0, cv);
			memcpy(stack[depth++], cv, 32);
		}
		b3_chunk(p + off, len - off, counter0 + chunk, 0, cv);
		for (i = depth - 1; i >= 0; i--)
			b3_parent(stack[i], cv, i == 0 && root ? B3_ROOT : 0, cv);
	}
}

static void b3_bytes(const uint32_t cv[8], uint8_t out[32])
{
	int i;
	for (i = 0; i < 8; i++) {
		out[4 * i] = (uint8_t)cv[i];
		out[4 * i + 1] = (uint8_t)(cv[i] >> 8);
		out[4 * i + 2] = (uint8_t)(cv[i] >> 16);
		out[4 * i + 3] = (uint8_t)(cv[i] >> 24);
	}
}

void tkart_blake3(const void *data, size_t len, uint8_t out[32])
{
	uint32_t cv[8];
	b3_tree(data, len, 0, 1, cv);
	b3_bytes(cv, out);
}

/* The section BLAKE3 from the chaining values of its n >= 2 pieces of
 * 2^22 bytes (FORMAT.md, "Hashing", format 1.4), 32 bytes each: the pieces
 * join as chunks do, the last merge with the ROOT flag. */
static void b3_join(const uint8_t *cvs, uint64_t n, uint8_t out[32])
{
	uint32_t stack[54][8], cv[8];
	uint64_t k, total;
	int depth = 0, i, w;
	for (k = 0; k < n; k++) {
		for (w = 0; w < 8; w++)
			cv[w] = le32(cvs + 32 * k + 4 * w);
		if (k + 1 == n)
			break;
		for (total = k + 1; (total & 1) == 0; total >>= 1)
			b3_parent(stack[--depth], cv, 0, cv);
		memcpy(stack[depth++], cv, 32);
	}
	for (i = depth - 1; i >= 0; i--)
		b3_parent(stack[i], cv, i == 0 ? B3_ROOT : 0, cv);
	b3_bytes(cv, out);
}

/* ---- arena --------------------------------------------------------------- */

static void *arena_lo(tkart *a, size_t n)
{
	size_t at = (a->arena_lo + 7) & ~(size_t)7;
	if (!a->arena || at > a->arena_hi || a->arena_hi - at < n)
		return NULL;
	a->arena_lo = at + n;
	return a->arena + at;
}

/* Tensors grow down from the top, so that the array stays contiguous while
 * strings and shapes grow up from the bottom. */
static tkart_tensor *arena_push_tensor(tkart *a)
{
	size_t n = sizeof(tkart_tensor);
	if (!a->arena || a->arena_hi < n || a->arena_hi - n < a->arena_lo)
		return NULL;
	a->arena_hi -= n;
	return (tkart_tensor *)(void *)(a->arena + a->arena_hi);
}

size_t tkart_arena_size(const void *buf, uint64_t size)
{
	const uint8_t *p = buf;
	uint64_t l;
	if (size < PREAMBLE_LEN + TRAILER_LEN)
		return 4096;
	l = le64(p + size - TRAILER_LEN + 8);
	if (l > TKART_MANIFEST_LIMIT || l > size)
		return 4096;
	/* The arena holds, per tensor, its entry (under 400 bytes for at least
	 * 150 bytes of JSON: every tensor carries two 64-digit hashes), its
	 * strings, 8 bytes per dimension (at least 2 bytes of JSON each), 32
	 * per hash (64 digits), an index slot pair and verified flags. */
	return (size_t)(8 * l + 4096);
}

/* ---- JSON ------------------------------------------------------------------
 * A parser for the manifest's own shape: each object of FORMAT.md has a
 * function that knows its keys, so the nesting is that of the schema (at
 * most five levels) and never follows the data; there is no generic value
 * walker and no recursion on the input. */

typedef struct {
	tkart *a;
	const uint8_t *s, *p, *end;
	uint64_t base; /* file offset of s */
} jp;

static int jbad(jp *j, const char *fmt, ...)
{
	va_list ap;
	char msg[200];
	va_start(ap, fmt);
	vsnprintf(msg, sizeof msg, fmt, ap);
	va_end(ap);
	return fail(j->a, TKART_E_MANIFEST, j->base + (uint64_t)(j->p - j->s),
	            "manifest: %s at manifest byte %lu (FORMAT.md, Manifest)", msg,
	            (unsigned long)(j->p - j->s));
}

static void ws(jp *j)
{
	while (j->p < j->end && (*j->p == ' ' || *j->p == '\t' || *j->p == '\n' || *j->p == '\r'))
		j->p++;
}

static int peek(jp *j)
{
	ws(j);
	return j->p < j->end ? *j->p : -1;
}

static int lit(jp *j, const char *w)
{
	size_t n = strlen(w);
	if ((size_t)(j->end - j->p) < n || memcmp(j->p, w, n) != 0)
		return jbad(j, "invalid JSON");
	j->p += n;
	return 0;
}

/* A JSON null where a value is expected: no key of the format takes null
 * (FORMAT.md, Manifest: an optional key is left out), so it is rejected
 * (-1); 0 otherwise. The callers' branches for 1 stay unused. */
static int jnull(jp *j)
{
	if (peek(j) == 'n') {
		if (lit(j, "null") == 0)
			jbad(j, "a value is null (no key takes null: an optional key is left out)");
		return -1;
	}
	return 0;
}

static int hexval(int c)
{
	if (c >= '0' && c <= '9') return c - '0';
	if (c >= 'a' && c <= 'f') return c - 'a' + 10;
	if (c >= 'A' && c <= 'F') return c - 'A' + 10;
	return -1;
}

static int u4(jp *j, const uint8_t *q, uint32_t *v)
{
	int i;
	*v = 0;
	if (j->end - q < 4)
		return jbad(j, "truncated \\u escape");
	for (i = 0; i < 4; i++) {
		int h = hexval(q[i]);
		if (h < 0)
			return jbad(j, "invalid \\u escape");
		*v = *v << 4 | (uint32_t)h;
	}
	return 0;
}

static size_t put_utf8(uint8_t *o, uint32_t c)
{
	if (c < 0x80) {
		o[0] = (uint8_t)c;
		return 1;
	}
	if (c < 0x800) {
		o[0] = (uint8_t)(0xC0 | c >> 6);
		o[1] = (uint8_t)(0x80 | (c & 0x3F));
		return 2;
	}
	if (c < 0x10000) {
		o[0] = (uint8_t)(0xE0 | c >> 12);
		o[1] = (uint8_t)(0x80 | (c >> 6 & 0x3F));
		o[2] = (uint8_t)(0x80 | (c & 0x3F));
		return 3;
	}
	o[0] = (uint8_t)(0xF0 | c >> 18);
	o[1] = (uint8_t)(0x80 | (c >> 12 & 0x3F));
	o[2] = (uint8_t)(0x80 | (c >> 6 & 0x3F));
	o[3] = (uint8_t)(0x80 | (c & 0x3F));
	return 4;
}

/* The length of the valid UTF-8 sequence at q (RFC 3629: no overlong
 * forms, no surrogates, nothing above U+10FFFF), or 0. */
static size_t utf8_len(const uint8_t *q, const uint8_t *end)
{
	uint8_t c = q[0];
	size_t n, i;
	uint32_t v, min;
	if (c < 0x80) return 1;
	if (c >= 0xC2 && c <= 0xDF) { n = 2; v = c & 0x1F; min = 0x80; }
	else if (c >= 0xE0 && c <= 0xEF) { n = 3; v = c & 0x0F; min = 0x800; }
	else if (c >= 0xF0 && c <= 0xF4) { n = 4; v = c & 0x07; min = 0x10000; }
	else return 0;
	if ((size_t)(end - q) < n) return 0;
	for (i = 1; i < n; i++) {
		if ((q[i] & 0xC0) != 0x80) return 0;
		v = v << 6 | (q[i] & 0x3F);
	}
	if (v < min || v > 0x10FFFF || (v >= 0xD800 && v <= 0xDFFF)) return 0;
	return n;
}

/* A JSON string, checked (escapes, UTF-8, no control character); *len is
 * its decoded length. With o, the decoded bytes are copied there,
 * NUL-terminated; -2 when they do not fit cap bytes. */
static int jstr_into(jp *j, uint8_t *o, size_t cap, size_t *len)
{
	size_t k = 0;
	if (peek(j) != '"')
		return jbad(j, "expected a string");
	j->p++;
	for (;;) {
		uint8_t c;
		uint8_t tmp[4];
		size_t n;
		if (j->p >= j->end)
			return jbad(j, "unterminated string");
		c = *j->p;
		if (c == '"') {
			j->p++;
			break;
		}
		if (c < 0x20)
			return jbad(j, "control character 0x%02x in a string", c);
		if (c == '\\') {
			uint32_t u;
			if (j->end - j->p < 2)
				return jbad(j, "unterminated string");
			switch (j->p[1]) {
			case '"': tmp[0] = '"'; n = 1; break;
			case '\\': tmp[0] = '\\'; n = 1; break;
			case '/': tmp[0] = '/'; n = 1; break;
			case 'b': tmp[0] = '\b'; n = 1; break;
			case 'f': tmp[0] = '\f'; n = 1; break;
			case 'n': tmp[0] = '\n'; n = 1; break;
			case 'r': tmp[0] = '\r'; n = 1; break;
			case 't': tmp[0] = '\t'; n = 1; break;
			case 'u':
				if (u4(j, j->p + 2, &u))
					return j->a->err;
				if (u >= 0xDC00 && u <= 0xDFFF)
					return jbad(j, "lone surrogate escape \\u%04x", (unsigned)u);
				if (u >= 0xD800 && u <= 0xDBFF) {
					uint32_t lo;
					if (j->end - j->p < 12 || j->p[6] != '\\' || j->p[7] != 'u')
						return jbad(j, "lone surrogate escape \\u%04x", (unsigned)u);
					if (u4(j, j->p + 8, &lo))
						return j->a->err;
					if (lo < 0xDC00 || lo > 0xDFFF)
						return jbad(j, "lone surrogate escape \\u%04x", (unsigned)u);
					u = 0x10000 + ((u - 0xD800) << 10) + (lo - 0xDC00);
					j->p += 6;
				}
				n = put_utf8(tmp, u);
				j->p += 4;
				break;
			default:
				return jbad(j, "invalid escape \\%c", j->p[1]);
			}
			j->p += 2;
		} else {
			n = utf8_len(j->p, j->end);
			if (n == 0)
				return jbad(j, "invalid UTF-8");
			memcpy(tmp, j->p, n);
			j->p += n;
		}
		if (o) {
			if (cap - k <= n)
				return -2; /* too long for the buffer: the caller decides */
			memcpy(o + k, tmp, n);
		}
		k += n;
	}
	if (o)
		o[k] = 0;
	*len = k;
	return 0;
}

/* A string into the arena (no escape grows the text, so its raw length
 * bounds the copy); null reads as "". */
static int jstr(jp *j, const char **res, size_t *len)
{
	const uint8_t *q;
	uint8_t *o;
	size_t cap, n = 0;
	int r = jnull(j);
	if (r < 0)
		return j->a->err;
	if (r) {
		*res = "";
		if (len)
			*len = 0;
		return 0;
	}
	if (peek(j) != '"')
		return jbad(j, "expected a string");
	/* find the raw extent: the closing quote not escaped */
	for (q = j->p + 1; q < j->end && *q != '"'; q++)
		if (*q == '\\' && q + 1 < j->end)
			q++;
	cap = (size_t)(q - j->p) + 1;
	o = arena_lo(j->a, cap);
	if (!o)
		return fail(j->a, TKART_E_ARENA, j->base + (uint64_t)(j->p - j->s),
		            "arena of %lu bytes is too small for the manifest (see tkart_arena_size)",
		            (unsigned long)j->a->arena_len);
	r = jstr_into(j, o, cap, &n);
	if (r == -2)
		return jbad(j, "string longer than its text");
	if (r)
		return r;
	if (strlen((const char *)o) != n)
		return jbad(j, "string with a U+0000 character (this reader's limit)");
	j->a->arena_lo = (size_t)(o - j->a->arena) + n + 1;
	*res = (const char *)o;
	if (len)
		*len = n;
	return 0;
}

/* A string only checked, not kept; "" for null. Sets *empty. */
static int jstr_skip(jp *j, int *empty)
{
	size_t n = 0;
	int r = jnull(j);
	if (r < 0)
		return j->a->err;
	if (r) {
		*empty = 1;
		return 0;
	}
	r = jstr_into(j, NULL, 0, &n);
	if (r)
		return r;
	*empty = n == 0;
	return 0;
}

/* An object key, decoded into key[cap]; a key too long for it is unknown
 * to every object (their keys are short). */
static int jkey(jp *j, char *key, size_t cap)
{
	size_t n;
	int r = jstr_into(j, (uint8_t *)key, cap, &n);
	if (r == -2)
		return jbad(j, "unknown key (longer than any key of the format)");
	if (r)
		return r;
	if (strlen(key) != n)
		return jbad(j, "unknown key with a NUL character");
	if (peek(j) != ':')
		return jbad(j, "invalid JSON: expected ':'");
	j->p++;
	return 0;
}

/* The grammar of a JSON number; *isint when it has no fraction or
 * exponent. */
static int jnumtext(jp *j, const uint8_t **start, size_t *n, int *isint)
{
	const uint8_t *q;
	ws(j);
	q = j->p;
	*isint = 1;
	if (q < j->end && *q == '-')
		q++;
	if (q >= j->end || *q < '0' || *q > '9')
		return jbad(j, "expected a number");
	if (*q == '0')
		q++;
	else
		while (q < j->end && *q >= '0' && *q <= '9')
			q++;
	if (q < j->end && *q == '.') {
		*isint = 0;
		q++;
		if (q >= j->end || *q < '0' || *q > '9')
			return jbad(j, "invalid number");
		while (q < j->end && *q >= '0' && *q <= '9')
			q++;
	}
	if (q < j->end && (*q == 'e' || *q == 'E')) {
		*isint = 0;
		q++;
		if (q < j->end && (*q == '+' || *q == '-'))
			q++;
		if (q >= j->end || *q < '0' || *q > '9')
			return jbad(j, "invalid number");
		while (q < j->end && *q >= '0' && *q <= '9')
			q++;
	}
	*start = j->p;
	*n = (size_t)(q - j->p);
	return 0;
}

/* An integer: a JSON number without fraction or exponent that fits a
 * signed 64-bit integer; null reads as 0. */
static int jint(jp *j, int64_t *v)
{
	const uint8_t *q;
	size_t n, i;
	int isint, neg, r = jnull(j);
	uint64_t u = 0, lim;
	if (r < 0)
		return j->a->err;
	if (r) {
		*v = 0;
		return 0;
	}
	if (peek(j) != '-' && (peek(j) < '0' || peek(j) > '9'))
		return jbad(j, "expected an integer");
	if (jnumtext(j, &q, &n, &isint))
		return j->a->err;
	if (!isint)
		return jbad(j, "%.*s is not an integer", (int)(n > 40 ? 40 : n), (const char *)q);
	neg = q[0] == '-';
	lim = neg ? (uint64_t)1 << 63 : ((uint64_t)1 << 63) - 1;
	for (i = (size_t)neg; i < n; i++) {
		unsigned d = (unsigned)(q[i] - '0');
		if (u > (lim - d) / 10)
			return jbad(j, "integer %.*s out of the 64-bit range", (int)(n > 40 ? 40 : n), (const char *)q);
		u = u * 10 + d;
	}
	j->p += n;
	if (neg)
		*v = u == (uint64_t)1 << 63 ? INT64_MIN : -(int64_t)u;
	else
		*v = (int64_t)u;
	return 0;
}

/* A number as double (single: as float, rounded once from the decimal
 * text); out of range is invalid, as for a decoder into the type; null
 * reads as 0. */
static int jnum(jp *j, double *d, float *f)
{
	char buf[TKART_NUMBER_LIMIT + 1];
	const uint8_t *q;
	size_t n, i;
	int isint, r = jnull(j);
	char *endp;
	const char *dp;
	if (r < 0)
		return j->a->err;
	if (r) {
		if (d) *d = 0;
		if (f) *f = 0;
		return 0;
	}
	if (peek(j) != '-' && (peek(j) < '0' || peek(j) > '9'))
		return jbad(j, "expected a number");
	if (jnumtext(j, &q, &n, &isint))
		return j->a->err;
	if (n > TKART_NUMBER_LIMIT)
		return jbad(j, "number of %lu bytes, over this reader's limit of %d", (unsigned long)n, TKART_NUMBER_LIMIT);
	/* strtod follows the C locale's decimal point: use whatever it is */
	dp = localeconv()->decimal_point;
	for (i = 0; i < n; i++)
		buf[i] = q[i] == '.' && dp && dp[0] ? dp[0] : (char)q[i];
	buf[n] = 0;
	if (d) {
		*d = strtod(buf, &endp);
		if (isinf(*d))
			return jbad(j, "number %s out of the float64 range", buf);
	}
	if (f) {
		*f = strtof(buf, &endp);
		if (isinf(*f))
			return jbad(j, "number %s out of the float32 range", buf);
	}
	j->p += n;
	return 0;
}

static int jbool(jp *j, int *v)
{
	int c = peek(j), r = jnull(j);
	if (r < 0)
		return j->a->err;
	if (r) {
		*v = 0;
		return 0;
	}
	if (c == 't') {
		*v = 1;
		return lit(j, "true");
	}
	if (c == 'f') {
		*v = 0;
		return lit(j, "false");
	}
	return jbad(j, "expected a boolean");
}

/* Object iteration: jobj_begin consumes '{' (1), or null (0: an absent
 * object); jobj_next gives the next key (1) or consumes '}' (0). */
/* jopen consumes the delimiter that opens a container (1), or null (0). */
static int jopen(jp *j, int *open, int delim, const char *expected)
{
	int r = jnull(j);
	if (r < 0)
		return j->a->err;
	if (r) {
		*open = 0;
		return 0;
	}
	if (peek(j) != delim)
		return jbad(j, expected);
	j->p++;
	*open = 1;
	return 0;
}

static int jobj_begin(jp *j, int *open)
{
	return jopen(j, open, '{', "expected an object");
}

static int jobj_next(jp *j, int *first, char *key, size_t cap, int *more)
{
	int c = peek(j);
	if (c == '}') {
		j->p++;
		*more = 0;
		return 0;
	}
	if (!*first) {
		if (c != ',')
			return jbad(j, "invalid JSON: expected ',' or '}'");
		j->p++;
	}
	*first = 0;
	*more = 1;
	return jkey(j, key, cap);
}

static int jarr_begin(jp *j, int *open)
{
	return jopen(j, open, '[', "expected an array");
}

/* arena_append takes the next element of an array that grows in the arena
 * as it is parsed: count elements of size bytes at base (NULL when count is
 * 0), the new one right after them. NULL, with the error set, when the
 * arena is full or something was taken from it in between. */
static void *arena_append(jp *j, const void *base, size_t count, size_t size, const char *what)
{
	uint8_t *p = arena_lo(j->a, size);
	if (!p) {
		fail(j->a, TKART_E_ARENA, j->base, "arena too small for the manifest (see tkart_arena_size)");
		return NULL;
	}
	if (count > 0 && p != (const uint8_t *)base + count * size) {
		fail(j->a, TKART_E_ARENA, j->base, "arena: %s not contiguous", what);
		return NULL;
	}
	return p;
}

static int jarr_next(jp *j, int *first, int *more)
{
	int c = peek(j);
	if (c == ']' && *first) {
		j->p++;
		*more = 0;
		return 0;
	}
	if (!*first) {
		if (c == ']') {
			j->p++;
			*more = 0;
			return 0;
		}
		if (c != ',')
			return jbad(j, "invalid JSON: expected ',' or ']'");
		j->p++;
	}
	*first = 0;
	*more = 1;
	return 0;
}

/* The index of key in keys (NULL-terminated), or a [manifest] error for an
 * unknown or repeated key. */
static int key_index(jp *j, const char *const *keys, const char *key, uint32_t *seen, int *idx,
                     const char *where)
{
	int i;
	for (i = 0; keys[i]; i++)
		if (strcmp(keys[i], key) == 0) {
			if (*seen >> i & 1)
				return jbad(j, "%s: key \"%s\" appears twice", where, key);
			*seen |= (uint32_t)1 << i;
			*idx = i;
			return 0;
		}
	return jbad(j, "%s: unknown key \"%.60s\"", where, key);
}

/* Every key of keys whose bit is in required must have been seen. */
static int need(jp *j, const char *const *keys, uint32_t seen, uint32_t required, const char *where)
{
	int i;
	for (i = 0; keys[i]; i++)
		if ((required >> i & 1) && !(seen >> i & 1))
			return jbad(j, "%s: required key \"%s\" is missing", where, keys[i]);
	return 0;
}

static int is_hash(const char *s, uint8_t out[32])
{
	int i;
	if (strlen(s) != 64)
		return 0;
	for (i = 0; i < 64; i++) {
		char c = s[i];
		if (!((c >= '0' && c <= '9') || (c >= 'a' && c <= 'f')))
			return 0;
	}
	if (out)
		for (i = 0; i < 32; i++)
			out[i] = (uint8_t)(hexval(s[2 * i]) << 4 | hexval(s[2 * i + 1]));
	return 1;
}

/* A hash string: decoded into out, or a [manifest] error. */
static int jhash(jp *j, uint8_t out[32], const char *what)
{
	char s[80];
	size_t n;
	int r = jnull(j);
	if (r < 0)
		return j->a->err;
	if (r == 0) {
		r = jstr_into(j, (uint8_t *)s, sizeof s, &n);
		if (r == -2)
			return jbad(j, "%s is not 64 lowercase hex digits", what);
		if (r)
			return r;
	} else {
		s[0] = 0;
	}
	if (!is_hash(s, out))
		return jbad(j, "%s \"%.70s\" is not 64 lowercase hex digits", what, s);
	return 0;
}

/* ---- manifest -------------------------------------------------------------- */

typedef struct {
	int has_sum;
	int has_minor;     /* the manifest's "minor" key (format 1.4) */
	int64_t minor_key; /* its value */
	uint64_t source_bytes;
} mfacts;

static int parse_section(jp *j, tkart_section *s, int *present, const char *where);

static const char *const SECTION_KEYS[] = {"offset", "length", "blake3", "chunks", "piece_cvs", NULL};

static int parse_section(jp *j, tkart_section *s, int *present, const char *where)
{
	int open, first = 1, more, idx, o2, f2, m2;
	uint32_t seen = 0;
	char key[32];
	int64_t off = 0, len = 0;
	memset(s, 0, sizeof *s);
	if (jobj_begin(j, &open))
		return j->a->err;
	*present = open;
	if (!open)
		return 0;
	s->chunks = NULL;
	for (;;) {
		if (jobj_next(j, &first, key, sizeof key, &more))
			return j->a->err;
		if (!more)
			break;
		if (key_index(j, SECTION_KEYS, key, &seen, &idx, where))
			return j->a->err;
		switch (idx) {
		case 0: if (jint(j, &off)) return j->a->err; break;
		case 1: if (jint(j, &len)) return j->a->err; break;
		case 2: if (jhash(j, s->blake3, "section blake3")) return j->a->err; break;
		case 3:
		case 4: {
			/* chunks (1.0 to 1.3) or piece_cvs (1.4): 32 bytes a piece */
			const uint8_t **list = idx == 3 ? &s->chunks : &s->piece_cvs;
			uint64_t *count = idx == 3 ? &s->nchunks : &s->npiece_cvs;
			if (jarr_begin(j, &o2))
				return j->a->err;
			f2 = 1;
			*count = 0;
			if (o2)
				for (;;) {
					uint8_t *h;
					if (jarr_next(j, &f2, &m2))
						return j->a->err;
					if (!m2)
						break;
					h = arena_append(j, *list, *count, 32, idx == 3 ? "chunk hashes" : "piece chaining values");
					if (!h)
						return j->a->err;
					if (*count == 0)
						*list = h;
					if (jhash(j, h, idx == 3 ? "chunk hash" : "piece chaining value"))
						return j->a->err;
					(*count)++;
				}
			break;
		}
		}
	}
	if (need(j, SECTION_KEYS, seen, 0x7, where))
		return j->a->err;
	if (off < 0 || len < 0)
		return jbad(j, "%s: section offset %lld length %lld", where, (long long)off, (long long)len);
	s->offset = (uint64_t)off;
	s->length = (uint64_t)len;
	{
		uint64_t want = s->length > CHUNK ? (s->length + CHUNK - 1) / CHUNK : 0;
		uint64_t have = s->npiece_cvs ? s->npiece_cvs : s->nchunks;
		if (s->nchunks && s->npiece_cvs)
			return jbad(j, "%s: both chunks and piece_cvs (a section records one of them)", where);
		if (have != want)
			return jbad(j, "%s: %llu piece records for %llu bytes (want %llu)", where,
			            (unsigned long long)have, (unsigned long long)s->length,
			            (unsigned long long)want);
	}
	return 0;
}

static int dtype_size(const char *d)
{
	static const char *const names[] = {"F64", "F32", "F16", "BF16", "F8_E4M3", "F8_E5M2", "I64", "I32",
	                                    "I16", "I8", "U64", "U32", "U16", "U8", "BOOL", NULL};
	static const int sizes[] = {8, 4, 2, 2, 1, 1, 8, 4, 2, 1, 8, 4, 2, 1, 1};
	int i;
	for (i = 0; names[i]; i++)
		if (strcmp(names[i], d) == 0)
			return sizes[i];
	return 0;
}

static int is_float_dtype(const char *d)
{
	return !strcmp(d, "F64") || !strcmp(d, "F32") || !strcmp(d, "F16") || !strcmp(d, "BF16") ||
	       !strcmp(d, "F8_E4M3") || !strcmp(d, "F8_E5M2");
}

static const char *const TENSOR_KEYS[] = {"name", "shape", "source_dtype", "kind", "dtype", "codec",
                                          "granularity", "scale", "scales", "exact", "section",
                                          "source_blake3", "trits", "stats", "source_span", NULL};
static const char *const TRITS_KEYS[] = {"neg", "zero", "pos", NULL};
static const char *const STATS_KEYS[] = {"zero_fraction", "clipped_fraction", "rel_rmse", "max_abs_err",
                                         "cosine", NULL};

/* The parsed group size of "group:N" (no sign, no leading zero, 1 to
 * 2^31-1), or 0. */
static int64_t group_n(const char *g)
{
	const char *d = g + 6;
	int64_t v = 0;
	size_t i, n = strlen(d);
	if (strncmp(g, "group:", 6) != 0 || n == 0 || n > 10 || d[0] == '0')
		return 0;
	for (i = 0; i < n; i++) {
		if (d[i] < '0' || d[i] > '9')
			return 0;
		v = v * 10 + (d[i] - '0');
	}
	return v <= 2147483647 ? v : 0;
}

static int parse_tensor(jp *j, tkart_tensor *t, int idx)
{
	int open, first = 1, more, k, o2, f2, m2;
	uint32_t seen = 0;
	char key[32], where[96];
	const char *kind = "", *codec = "", *gran = NULL;
	int has_trits = 0, has_stats = 0, has_section = 0, has_gran = 0;
	uint8_t src_hash[32];
	int64_t *dims = NULL;
	uint64_t n = 1;
	int overflow = 0;
	memset(t, 0, sizeof *t);
	t->name = t->source_dtype = t->dtype = t->granularity = "";
	snprintf(where, sizeof where, "tensors[%d]", idx);
	if (jobj_begin(j, &open))
		return j->a->err;
	if (!open)
		return jbad(j, "%s is null", where);
	for (;;) {
		if (jobj_next(j, &first, key, sizeof key, &more))
			return j->a->err;
		if (!more)
			break;
		if (key_index(j, TENSOR_KEYS, key, &seen, &k, where))
			return j->a->err;
		switch (k) {
		case 0:
			if (jstr(j, &t->name, NULL)) return j->a->err;
			if (t->name[0])
				snprintf(where, sizeof where, "tensor \"%.60s\"", t->name);
			break;
		case 1:
			if (jarr_begin(j, &o2))
				return j->a->err;
			f2 = 1;
			t->ndim = 0;
			if (o2)
				for (;;) {
					int64_t *d;
					if (jarr_next(j, &f2, &m2))
						return j->a->err;
					if (!m2)
						break;
					d = arena_append(j, dims, t->ndim, sizeof *d, "shape");
					if (!d)
						return j->a->err;
					if (!dims)
						dims = d;
					if (jint(j, d))
						return j->a->err;
					if (t->ndim == 1 << 20)
						return jbad(j, "%s: more than 2^20 dimensions", where);
					t->ndim++;
				}
			break;
		case 2: if (jstr(j, &t->source_dtype, NULL)) return j->a->err; break;
		case 3: if (jstr(j, &kind, NULL)) return j->a->err; break;
		case 4: if (jstr(j, &t->dtype, NULL)) return j->a->err; break;
		case 5: if (jstr(j, &codec, NULL)) return j->a->err; break;
		case 6: {
			int isnull = jnull(j);
			if (isnull < 0)
				return j->a->err;
			if (isnull)
				break;
			if (jstr(j, &gran, NULL)) return j->a->err;
			has_gran = 1;
			break;
		}
		case 7: if (jnum(j, NULL, &t->scale)) return j->a->err; break;
		case 8: if (parse_section(j, &t->scales, &t->has_scales, where)) return j->a->err; break;
		case 9: if (jbool(j, &t->exact)) return j->a->err; break;
		case 10: if (parse_section(j, &t->section, &has_section, where)) return j->a->err; break;
		case 11: if (jhash(j, src_hash, "source_blake3")) return j->a->err; break;
		case 14: if (jhash(j, src_hash, "source_span")) return j->a->err; break;
		case 12: {
			uint32_t s2 = 0;
			int f3 = 1, m3, o3, i3;
			char k3[16];
			int64_t *c[3];
			c[0] = &t->neg; c[1] = &t->zero; c[2] = &t->pos;
			if (jobj_begin(j, &o3)) return j->a->err;
			has_trits = o3;
			if (o3)
				for (;;) {
					if (jobj_next(j, &f3, k3, sizeof k3, &m3)) return j->a->err;
					if (!m3) break;
					if (key_index(j, TRITS_KEYS, k3, &s2, &i3, "trits")) return j->a->err;
					if (jint(j, c[i3])) return j->a->err;
				}
			if (o3 && need(j, TRITS_KEYS, s2, 0x7, "trits")) return j->a->err;
			break;
		}
		case 13: {
			uint32_t s2 = 0;
			int f3 = 1, m3, o3, i3;
			char k3[24];
			double v;
			if (jobj_begin(j, &o3)) return j->a->err;
			has_stats = o3;
			if (o3)
				for (;;) {
					if (jobj_next(j, &f3, k3, sizeof k3, &m3)) return j->a->err;
					if (!m3) break;
					if (key_index(j, STATS_KEYS, k3, &s2, &i3, "stats")) return j->a->err;
					if (jnum(j, &v, NULL)) return j->a->err;
				}
			if (o3 && need(j, STATS_KEYS, s2, 0x1F, "stats")) return j->a->err;
			break;
		}
		}
	}
	if (need(j, TENSOR_KEYS, seen, 1u << 0 | 1u << 1 | 1u << 2 | 1u << 3 | 1u << 5 | 1u << 10, where))
		return j->a->err;
	/* one of source_blake3 (formats 1.0 to 1.3) and source_span (1.4) */
	if ((seen >> 11 & 1) && (seen >> 14 & 1))
		return jbad(j, "%s: both source_blake3 and source_span", where);
	if (!(seen >> 11 & 1) && !(seen >> 14 & 1))
		return jbad(j, "%s: required key \"source_span\" (\"source_blake3\" before format 1.4) is missing", where);
	if (seen >> 14 & 1)
		j->a->nspan++;
	else
		j->a->nblake3++;
	if (!has_section || !(seen >> 10 & 1))
		return jbad(j, "%s: no section", where);
	if (t->name[0] == 0)
		return jbad(j, "%s has an empty name", where);
	t->shape = dims;
	for (k = 0; k < t->ndim; k++) {
		uint64_t d;
		if (dims[k] < 0)
			return jbad(j, "%s: shape dimension %lld is negative", where, (long long)dims[k]);
		d = (uint64_t)dims[k];
		if (!overflow && d != 0 && n > (((uint64_t)1 << 63) - 1) / d)
			overflow = 1;
		n *= d;
		if (overflow)
			return jbad(j, "%s: the element count of its shape overflows int64", where);
	}
	t->n = (int64_t)n;
	if (t->ndim >= 1) {
		t->rows = dims[0];
		uint64_t c = 1; /* wraps only for an empty tensor, whose rows are 0 */
		for (k = 1; k < t->ndim; k++)
			c *= (uint64_t)dims[k];
		t->cols = (int64_t)c;
	}
	if (has_gran)
		t->granularity = gran;
	if (!strcmp(kind, "ternary")) t->kind = TKART_TERNARY;
	else if (!strcmp(kind, "int8")) t->kind = TKART_INT8;
	else if (!strcmp(kind, "kept")) t->kind = TKART_KEPT;
	else return jbad(j, "%s: kind \"%.40s\" (want ternary, int8 or kept)", where, kind);
	if (!strcmp(codec, "bits2")) t->codec = TKART_BITS2;
	else if (!strcmp(codec, "base3")) t->codec = TKART_BASE3;
	else if (!strcmp(codec, "entropy")) t->codec = TKART_ENTROPY;
	else if (!strcmp(codec, "raw")) t->codec = TKART_RAW;
	if (t->kind != TKART_KEPT && !is_float_dtype(t->source_dtype))
		return jbad(j, "%s: source dtype \"%.40s\" is not a float dtype (only float tensors are quantized)", where, t->source_dtype);
	if (has_gran) {
		if (!strcmp(gran, "tensor")) t->gran = TKART_GRAN_TENSOR;
		else if (!strcmp(gran, "row")) t->gran = TKART_GRAN_ROW;
		else if (group_n(gran)) t->gran = TKART_GRAN_GROUP;
		else return jbad(j, "%s: granularity \"%.40s\" (want tensor, row or group:N, N without sign or leading zero)", where, gran);
	}
	if (t->kind == TKART_TERNARY || t->kind == TKART_INT8) {
		uint64_t len = t->section.length;
		if (t->kind == TKART_TERNARY) {
			uint64_t b = (n + 4) / 5, lo, hi;
			if (t->codec == TKART_BITS2) lo = hi = (n + 3) / 4;
			else if (t->codec == TKART_BASE3) lo = hi = b;
			else if (t->codec == TKART_ENTROPY) {
				uint64_t blocks = (b + ENTROPY_BLOCK_MAX - 1) / ENTROPY_BLOCK_MAX;
				if (blocks < 1) blocks = 1;
				/* the shortest frame holding b bytes: 4-byte blocks of at
				 * most 131072 content bytes behind a 6-byte header */
				lo = b == 0 ? 9 : 6 + 4 * ((b + ENTROPY_BLOCK_MAX - 1) / ENTROPY_BLOCK_MAX);
				hi = 13 + 3 * blocks + b;
			} else
				return jbad(j, "%s: codec \"%.40s\" is not a trit codec", where, codec);
			if (len < lo || len > hi)
				return jbad(j, "%s: section length %llu, codec %s takes %llu to %llu bytes for %llu trits",
				            where, (unsigned long long)len, codec, (unsigned long long)lo,
				            (unsigned long long)hi, (unsigned long long)n);
			if (t->dtype[0])
				return jbad(j, "%s: ternary tensor with dtype \"%.40s\"", where, t->dtype);
			if (!has_trits || t->neg < 0 || t->zero < 0 || t->pos < 0 ||
			    (uint64_t)t->neg + (uint64_t)t->zero + (uint64_t)t->pos != n)
				return jbad(j, "%s: trit counts do not sum to %llu", where, (unsigned long long)n);
			if (!has_stats)
				return jbad(j, "%s: missing stats", where);
		} else {
			if (t->codec != TKART_RAW)
				return jbad(j, "%s: int8 tensor with codec \"%.40s\" (want raw)", where, codec);
			if (len != n)
				return jbad(j, "%s: section length %llu, %llu int8 codes need %llu", where,
				            (unsigned long long)len, (unsigned long long)n, (unsigned long long)n);
			if (t->gran != TKART_GRAN_ROW)
				return jbad(j, "%s: int8 tensor with granularity \"%.40s\" (want row)", where, t->granularity);
			if (t->dtype[0] || t->scale != 0 || has_trits || t->exact)
				return jbad(j, "%s: int8 tensor carries kept or ternary fields", where);
			if (!has_stats)
				return jbad(j, "%s: missing stats", where);
		}
		if (!has_gran)
			return jbad(j, "%s: missing granularity", where);
		if (t->ndim < 2)
			return jbad(j, "%s: %s tensor needs 2 or more dimensions", where, kind);
		if (n == 0)
			t->group = 0;
		else if (t->gran == TKART_GRAN_TENSOR)
			t->group = (int64_t)n;
		else if (t->gran == TKART_GRAN_ROW)
			t->group = t->cols;
		else {
			int64_t g = group_n(gran);
			if (t->cols % g != 0)
				return jbad(j, "%s: %s needs the row length %lld to be a multiple of %lld", where, gran,
				            (long long)t->cols, (long long)g);
			t->group = g;
		}
		t->nscales = t->group ? t->n / t->group : 0;
		if (t->kind == TKART_TERNARY && t->gran == TKART_GRAN_TENSOR) {
			if (t->has_scales)
				return jbad(j, "%s: tensor granularity with a scales section", where);
			if (!(t->scale > 0) || isinf(t->scale))
				return jbad(j, "%s: scale %g is not a positive finite float32", where, (double)t->scale);
			t->nscales = 1;
		} else {
			if (t->scale != 0)
				return jbad(j, "%s: granularity %s with a single scale %g", where, gran, (double)t->scale);
			if (!t->has_scales)
				return jbad(j, "%s: granularity %s without a scales section", where, gran);
			if (t->scales.length != 4 * (uint64_t)t->nscales)
				return jbad(j, "%s: scales length %llu, %lld float32 scales need %llu", where,
				            (unsigned long long)t->scales.length, (long long)t->nscales,
				            (unsigned long long)(4 * (uint64_t)t->nscales));
		}
	} else {
		int size;
		if (t->codec != TKART_RAW)
			return jbad(j, "%s: kept tensor with codec \"%.40s\" (want raw)", where, codec);
		if (!t->dtype[0])
			return jbad(j, "%s: kept tensor without dtype", where);
		if (t->scale != 0 || has_trits || has_gran || t->has_scales || t->exact)
			return jbad(j, "%s: kept tensor carries ternary fields", where);
		size = dtype_size(t->dtype);
		if (!size && strcmp(t->dtype, t->source_dtype) != 0)
			return jbad(j, "%s: unknown dtype \"%.40s\"", where, t->dtype);
		if (has_stats != (strcmp(t->dtype, t->source_dtype) != 0))
			return jbad(j, "%s: stats are required exactly when the dtype changes", where);
		if (strcmp(t->dtype, t->source_dtype) != 0 &&
		    (!(strcmp(t->dtype, "F16") == 0 || strcmp(t->dtype, "BF16") == 0 || strcmp(t->dtype, "F32") == 0) ||
		     !is_float_dtype(t->source_dtype)))
			return jbad(j, "%s: kept tensor converted from \"%.40s\" to \"%.40s\" (a float dtype converts to F16, BF16 or F32 only)",
			            where, t->source_dtype, t->dtype);
		if (!size) {
			if ((n == 0) != (t->section.length == 0))
				return jbad(j, "%s: section length %llu for %llu elements of dtype \"%.40s\"", where,
				            (unsigned long long)t->section.length, (unsigned long long)n, t->dtype);
		} else if ((n != 0 && (uint64_t)size > UINT64_MAX / n) || n * (uint64_t)size != t->section.length) {
			return jbad(j, "%s: section length %llu, %llu %s elements need %llu", where,
			            (unsigned long long)t->section.length, (unsigned long long)n, t->dtype,
			            (unsigned long long)(n * (uint64_t)size));
		}
	}
	return 0;
}

static const char *const MANIFEST_KEYS[] = {"format", "version", "tool", "created", "recipe", "source",
                                            "policy", "tensors", "totals", "companions", "minor", NULL};
static const char *const RECIPE_KEYS[] = {"method", "scale_rule", "epsilon", "tie", "sum", NULL};
static const char *const SOURCE_KEYS[] = {"files", "metadata", NULL};
static const char *const FILE_KEYS[] = {"name", "bytes", "blake3", NULL};
static const char *const TOTALS_KEYS[] = {"tensors", "ternary_tensors", "int8_tensors", "kept_tensors",
                                          "ternary_params", "int8_params", "kept_params", "source_bytes",
                                          "ternary_section_bytes", "int8_section_bytes", "kept_section_bytes",
                                          "bits_per_ternary_weight", NULL};

static int parse_recipe(jp *j, mfacts *mf)
{
	int open, first = 1, more, k;
	uint32_t seen = 0;
	char key[24];
	const char *method = "", *rule = "", *tie = "", *sum = "";
	double eps = 0;
	float e32;
	if (jobj_begin(j, &open))
		return j->a->err;
	while (open) {
		if (jobj_next(j, &first, key, sizeof key, &more))
			return j->a->err;
		if (!more)
			break;
		if (key_index(j, RECIPE_KEYS, key, &seen, &k, "recipe"))
			return j->a->err;
		switch (k) {
		case 0: if (jstr(j, &method, NULL)) return j->a->err; break;
		case 1: if (jstr(j, &rule, NULL)) return j->a->err; break;
		case 2: if (jnum(j, &eps, NULL)) return j->a->err; break;
		case 3: if (jstr(j, &tie, NULL)) return j->a->err; break;
		case 4: if (jstr(j, &sum, NULL)) return j->a->err; break;
		}
	}
	if (!open)
		return jbad(j, "recipe is not an object");
	if (need(j, RECIPE_KEYS, seen, 0xF, "recipe"))
		return j->a->err;
	if (strcmp(method, "absmean"))
		return jbad(j, "recipe: method \"%.40s\" (want absmean)", method);
	if (strcmp(rule, "reciprocal") && strcmp(rule, "quotient"))
		return jbad(j, "recipe: scale_rule \"%.40s\"", rule);
	if (strcmp(tie, "half-even") && strcmp(tie, "half-away"))
		return jbad(j, "recipe: tie \"%.40s\"", tie);
	if (sum[0] && strcmp(sum, "blocked16") && strcmp(sum, "strided16") && strcmp(sum, "sequential"))
		return jbad(j, "recipe: sum \"%.40s\" (want blocked16, strided16 or sequential)", sum);
	e32 = (float)eps;
	if (!(eps > 0) || eps > 0.01 || e32 == 0)
		return jbad(j, "recipe: epsilon %g (want a number in (0, 0.01] whose float32 is nonzero)", eps);
	/* the minor version the sum order needs: the key is of 1.2, blocked16 of 1.4 */
	mf->has_sum = !sum[0] ? 0 : strcmp(sum, "blocked16") ? 2 : 4;
	return 0;
}

static int parse_source(jp *j, mfacts *mf)
{
	int open, first = 1, more, k, o2, f2, m2;
	uint32_t seen = 0;
	char key[16];
	if (jobj_begin(j, &open))
		return j->a->err;
	while (open) {
		if (jobj_next(j, &first, key, sizeof key, &more))
			return j->a->err;
		if (!more)
			break;
		if (key_index(j, SOURCE_KEYS, key, &seen, &k, "source"))
			return j->a->err;
		if (k == 0) {
			if (jarr_begin(j, &o2))
				return j->a->err;
			f2 = 1;
			while (o2) {
				int o3, f3 = 1, m3, i3, empty;
				uint32_t s3 = 0;
				char k3[16];
				int64_t bytes = 0;
				uint8_t h[32];
				if (jarr_next(j, &f2, &m2))
					return j->a->err;
				if (!m2)
					break;
				if (jobj_begin(j, &o3))
					return j->a->err;
				while (o3) {
					if (jobj_next(j, &f3, k3, sizeof k3, &m3))
						return j->a->err;
					if (!m3)
						break;
					if (key_index(j, FILE_KEYS, k3, &s3, &i3, "source.files[]"))
						return j->a->err;
					if (i3 == 0 && jstr_skip(j, &empty)) return j->a->err;
					if (i3 == 1 && jint(j, &bytes)) return j->a->err;
					if (i3 == 2 && jhash(j, h, "source file blake3")) return j->a->err;
				}
				if (need(j, FILE_KEYS, s3, 0x7, "source.files[]"))
					return j->a->err;
				if (bytes < 0)
					return jbad(j, "source file of %lld bytes", (long long)bytes);
				mf->source_bytes += (uint64_t)bytes;
			}
		} else {
			/* metadata: an object of strings with distinct keys; the keys
			 * stay in the arena until the object ends, their pointers in a
			 * list growing down from the top */
			size_t mark = j->a->arena_lo, top = j->a->arena_hi, nkeys = 0, i;
			int o3, f3 = 1, empty;
			if (jobj_begin(j, &o3))
				return j->a->err;
			while (o3) {
				const char *kk, **slot;
				int c = peek(j);
				if (c == '}') {
					j->p++;
					break;
				}
				if (!f3) {
					if (c != ',')
						return jbad(j, "invalid JSON: expected ',' or '}'");
					j->p++;
				}
				f3 = 0;
				if (peek(j) != '"')
					return jbad(j, "expected a string key");
				if (jstr(j, &kk, NULL))
					return j->a->err;
				slot = (const char **)(void *)(j->a->arena + j->a->arena_hi);
				for (i = 0; i < nkeys; i++)
					if (!strcmp(slot[i], kk))
						return jbad(j, "source.metadata: key \"%.60s\" appears twice", kk);
				if (j->a->arena_hi < sizeof *slot || j->a->arena_hi - sizeof *slot < j->a->arena_lo)
					return fail(j->a, TKART_E_ARENA, j->base, "arena too small for the manifest (see tkart_arena_size)");
				j->a->arena_hi -= sizeof *slot;
				slot = (const char **)(void *)(j->a->arena + j->a->arena_hi);
				*slot = kk;
				nkeys++;
				if (peek(j) != ':')
					return jbad(j, "invalid JSON: expected ':'");
				j->p++;
				if (jstr_skip(j, &empty))
					return j->a->err;
			}
			j->a->arena_lo = mark;
			j->a->arena_hi = top;
		}
	}
	if (!open)
		return jbad(j, "source is not an object");
	return need(j, SOURCE_KEYS, seen, 0x1, "source");
}

static int parse_policy(jp *j)
{
	int open, first = 1, more, empty, count = 0;
	if (jarr_begin(j, &open))
		return j->a->err;
	if (!open)
		return 0;
	for (;;) {
		if (jarr_next(j, &first, &more))
			return j->a->err;
		if (!more)
			break;
		if (jstr_skip(j, &empty))
			return j->a->err;
		if (empty)
			return jbad(j, "policy rule %d is empty", count);
		count++;
	}
	if (count == 0)
		return jbad(j, "policy is an empty array (leave it out, or give the rules)");
	return 0;
}

/* "YYYY-MM-DDThh:mm:ssZ" and a valid date and time. */
static int valid_created(const char *s)
{
	static const int mdays[] = {31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
	int i, y, mo, d, h, mi, se, leap;
	const char *pat = "dddd-dd-ddTdd:dd:ddZ";
	if (strlen(s) != 20)
		return 0;
	for (i = 0; i < 20; i++) {
		if (pat[i] == 'd') {
			if (s[i] < '0' || s[i] > '9')
				return 0;
		} else if (s[i] != pat[i])
			return 0;
	}
	{
		int k;
		int v[6];
		const int at[6] = {0, 5, 8, 11, 14, 17}, w[6] = {4, 2, 2, 2, 2, 2};
		for (k = 0; k < 6; k++) {
			int x = 0, q;
			for (q = 0; q < w[k]; q++)
				x = x * 10 + (s[at[k] + q] - '0');
			v[k] = x;
		}
		y = v[0]; mo = v[1]; d = v[2]; h = v[3]; mi = v[4]; se = v[5];
	}
	leap = (y % 4 == 0 && y % 100 != 0) || y % 400 == 0;
	if (y < 1 || mo < 1 || mo > 12 || d < 1)
		return 0;
	if (d > mdays[mo - 1] + (mo == 2 && leap))
		return 0;
	return h <= 23 && mi <= 59 && se <= 59;
}

static const char *const COMPANION_KEYS[] = {"name", "section", NULL};

/* The name rules of FORMAT.md, "Companions": a base name. */
static int valid_companion_name(const char *n)
{
	size_t len = strlen(n), i;
	if (len == 0 || len > 255 || !strcmp(n, ".") || !strcmp(n, ".."))
		return 0;
	for (i = 0; i < len; i++) {
		unsigned char c = (unsigned char)n[i];
		if (c == '/' || c == '\\' || c < 0x20 || c == 0x7F)
			return 0;
	}
	return 1;
}

static int ascii_fold_equal(const char *x, const char *y)
{
	for (; *x && *y; x++, y++) {
		char a = *x >= 'A' && *x <= 'Z' ? (char)(*x + 32) : *x;
		char b = *y >= 'A' && *y <= 'Z' ? (char)(*y + 32) : *y;
		if (a != b)
			return 0;
	}
	return *x == *y;
}

/* "companions" (format 1.3): a non-empty array, absent when null; the
 * entries grow down from the top of the arena like the tensors. */
static int parse_companions(jp *j)
{
	tkart *a = j->a;
	int open, first = 1, more;
	size_t n = 0, i, k;
	tkart_companion *top = NULL;
	if (jarr_begin(j, &open))
		return a->err;
	if (!open)
		return 0;
	for (;;) {
		tkart_companion *c;
		int o2, f2 = 1, m2, idx, has_section = 0;
		uint32_t seen = 0;
		char key[16], where[96];
		if (jarr_next(j, &first, &more))
			return a->err;
		if (!more)
			break;
		if (a->arena_hi < sizeof *c || a->arena_hi - sizeof *c < a->arena_lo ||
		    (top && a->arena + a->arena_hi != (uint8_t *)top))
			return fail(a, TKART_E_ARENA, j->base, "arena of %lu bytes is too small for the manifest (see tkart_arena_size)",
			            (unsigned long)a->arena_len);
		a->arena_hi -= sizeof *c;
		c = (tkart_companion *)(void *)(a->arena + a->arena_hi);
		top = c;
		memset(c, 0, sizeof *c);
		c->name = "";
		snprintf(where, sizeof where, "companions[%lu]", (unsigned long)n);
		if (jobj_begin(j, &o2))
			return a->err;
		while (o2) {
			if (jobj_next(j, &f2, key, sizeof key, &m2))
				return a->err;
			if (!m2)
				break;
			if (key_index(j, COMPANION_KEYS, key, &seen, &idx, where))
				return a->err;
			if (idx == 0 && jstr(j, &c->name, NULL))
				return a->err;
			if (idx == 1 && parse_section(j, &c->section, &has_section, where))
				return a->err;
		}
		if (need(j, COMPANION_KEYS, seen, 0x3, where))
			return a->err;
		if (!valid_companion_name(c->name))
			return jbad(j, "%s: companion name \"%.60s\" is not a base name (FORMAT.md, Companions)", where, c->name);
		if (!has_section)
			return jbad(j, "companion \"%.60s\": no section", c->name);
		n++;
	}
	if (n == 0)
		return jbad(j, "companions is an empty array (leave it out, or list the files)");
	/* pushed downwards: reverse into file order */
	for (i = 0; i < n / 2; i++) {
		tkart_companion tmp = top[i];
		top[i] = top[n - 1 - i];
		top[n - 1 - i] = tmp;
	}
	for (i = 0; i < n; i++)
		for (k = 0; k < i; k++)
			if (ascii_fold_equal(top[i].name, top[k].name))
				return jbad(j, "companion name \"%.60s\" repeats \"%.60s\", ASCII case ignored (FORMAT.md, Companions)",
				            top[i].name, top[k].name);
	a->companions = top;
	a->ncompanions = n;
	return 0;
}

static uint32_t name_hash(const char *s)
{
	uint32_t h = 2166136261u; /* FNV-1a: common practice for a small string table */
	for (; *s; s++)
		h = (h ^ (uint8_t)*s) * 16777619u;
	return h;
}

static int parse_manifest(tkart *a, const uint8_t *body, uint64_t len, mfacts *mf)
{
	jp jj, *j = &jj;
	int open, first = 1, more, k, o2, f2, m2;
	uint32_t seen = 0;
	char key[16];
	const char *format = "", *created = "";
	/* keys are short: the longest top-level key, "companions", fits key[] */
	int64_t version = 0, totals[11];
	int has_totals_bpw = 0;
	size_t i, nt = 0;
	tkart_tensor *top = NULL;
	memset(totals, 0, sizeof totals);
	j->a = a;
	j->s = j->p = body;
	j->end = body + len;
	j->base = a->manifest_offset;
	if (jobj_begin(j, &open))
		return a->err;
	while (open) {
		if (jobj_next(j, &first, key, sizeof key, &more))
			return a->err;
		if (!more)
			break;
		if (key_index(j, MANIFEST_KEYS, key, &seen, &k, "manifest"))
			return a->err;
		switch (k) {
		case 0: if (jstr(j, &format, NULL)) return a->err; break;
		case 1: if (jint(j, &version)) return a->err; break;
		case 2: { int e; if (jstr_skip(j, &e)) return a->err; break; }
		case 3: if (jstr(j, &created, NULL)) return a->err; break;
		case 4: if (parse_recipe(j, mf)) return a->err; break;
		case 5: if (parse_source(j, mf)) return a->err; break;
		case 6: if (parse_policy(j)) return a->err; break;
		case 7:
			if (jarr_begin(j, &o2))
				return a->err;
			f2 = 1;
			while (o2) {
				tkart_tensor *t;
				if (jarr_next(j, &f2, &m2))
					return a->err;
				if (!m2)
					break;
				if (top && a->arena + a->arena_hi != (uint8_t *)top)
					return fail(a, TKART_E_ARENA, j->base, "arena: tensors not contiguous");
				t = arena_push_tensor(a);
				if (!t)
					return fail(a, TKART_E_ARENA, j->base, "arena of %lu bytes is too small for the manifest (see tkart_arena_size)",
					            (unsigned long)a->arena_len);
				top = t;
				if (parse_tensor(j, t, (int)nt))
					return a->err;
				nt++;
			}
			break;
		case 9: if (parse_companions(j)) return a->err; break;
		case 10:
			if (jint(j, &mf->minor_key))
				return a->err;
			if (mf->minor_key != TKART_MINOR)
				return jbad(j, "minor %lld (4 is the only value this version defines)", (long long)mf->minor_key);
			mf->has_minor = 1;
			break;
		case 8: {
			int o3, f3 = 1, m3, i3;
			uint32_t s3 = 0;
			char k3[32];
			if (jobj_begin(j, &o3))
				return a->err;
			while (o3) {
				if (jobj_next(j, &f3, k3, sizeof k3, &m3))
					return a->err;
				if (!m3)
					break;
				if (key_index(j, TOTALS_KEYS, k3, &s3, &i3, "totals"))
					return a->err;
				if (i3 < 11) {
					if (jint(j, &totals[i3]))
						return a->err;
				} else {
					double v;
					if (jnum(j, &v, NULL))
						return a->err;
					has_totals_bpw = 1;
				}
			}
			if (!o3)
				return jbad(j, "totals is not an object");
			if (need(j, TOTALS_KEYS, s3, 0xFFF, "totals"))
				return a->err;
			break;
		}
		}
	}
	(void)has_totals_bpw;
	if (!open)
		return jbad(j, "the manifest is not an object");
	/* format0 version1 tool2 recipe4 source5 tensors7 totals8 */
	if (need(j, MANIFEST_KEYS, seen, 1u << 0 | 1u << 1 | 1u << 2 | 1u << 4 | 1u << 5 | 1u << 7 | 1u << 8, "manifest"))
		return a->err;
	if (peek(j) != -1)
		return jbad(j, "data after the JSON object");
	if (strcmp(format, "ternkit-artifact"))
		return jbad(j, "format \"%.40s\" (want ternkit-artifact)", format);
	if (version != 1)
		return jbad(j, "version %lld (want 1)", (long long)version);
	if (created[0] && !valid_created(created))
		return jbad(j, "created \"%.40s\" is not a UTC time like 2006-01-02T15:04:05Z", created);
	if (!(seen >> 4 & 1)) {
		/* a missing recipe reads as the zero recipe: its method "" is invalid */
		return jbad(j, "recipe: method \"\" (want absmean)");
	}
	/* the tensors were pushed downwards: reverse them into file order */
	a->ntensors = nt;
	a->tensors = top;
	if (nt) {
		tkart_tensor *arr = top, tmp;
		for (i = 0; i < nt / 2; i++) {
			tmp = arr[i];
			arr[i] = arr[nt - 1 - i];
			arr[nt - 1 - i] = tmp;
		}
	}
	/* names: unique, through an open-addressing table kept for tkart_find */
	a->index_slots = 2 * nt + 1;
	a->index = arena_lo(a, a->index_slots * sizeof *a->index);
	a->verified = arena_lo(a, 2 * nt + a->ncompanions + 1);
	if (!a->index || !a->verified)
		return fail(a, TKART_E_ARENA, j->base, "arena of %lu bytes is too small for the manifest (see tkart_arena_size)",
		            (unsigned long)a->arena_len);
	memset(a->verified, 0, 2 * nt + a->ncompanions + 1);
	for (i = 0; i < a->index_slots; i++)
		a->index[i] = UINT32_MAX;
	for (i = 0; i < nt; i++) {
		size_t s = name_hash(a->tensors[i].name) % a->index_slots;
		while (a->index[s] != UINT32_MAX) {
			if (!strcmp(a->tensors[a->index[s]].name, a->tensors[i].name))
				return jbad(j, "duplicate tensor name \"%.60s\"", a->tensors[i].name);
			s = (s + 1) % a->index_slots;
		}
		a->index[s] = (uint32_t)i;
	}
	{
		/* totals, in wrapping 64-bit arithmetic */
		uint64_t want[11];
		memset(want, 0, sizeof want);
		want[0] = nt;
		want[7] = mf->source_bytes;
		for (i = 0; i < nt; i++) {
			const tkart_tensor *t = &a->tensors[i];
			int kk = t->kind == TKART_TERNARY ? 0 : t->kind == TKART_INT8 ? 1 : 2;
			uint64_t stored = t->section.length + (t->has_scales ? t->scales.length : 0);
			want[1 + kk]++;
			want[4 + kk] += (uint64_t)t->n;
			want[8 + kk] += stored;
		}
		for (i = 0; i < 11; i++)
			if ((uint64_t)totals[i] != want[i])
				return jbad(j, "totals.%s is %lld, the tensors give %llu", TOTALS_KEYS[i], (long long)totals[i],
				            (unsigned long long)want[i]);
	}
	return 0;
}

/* ---- open ------------------------------------------------------------------ */

static uint64_t align_up(uint64_t x) { return (x + ALIGN - 1) & ~(uint64_t)(ALIGN - 1); }

int tkart_open(tkart *a, const void *buf, uint64_t size, void *arena, size_t arena_len)
{
	const uint8_t *p = buf, *tr;
	static const uint8_t magic[8] = {'T', 'K', 'A', 'R', 'T', 0, '\r', '\n'};
	static const uint8_t tmagic[8] = {'T', 'K', 'E', 'N', 'D', 0, '\r', '\n'};
	uint64_t m, l, at, next;
	uint8_t h[32];
	mfacts mf;
	unsigned used = 0, major;
	size_t i;
	memset(a, 0, sizeof *a);
	a->buf = p;
	a->size = size;
	if (arena) {
		/* align the arena to 8 bytes at both ends */
		size_t skip = (8 - (size_t)((uintptr_t)arena & 7)) & 7;
		if (arena_len < skip)
			skip = arena_len;
		a->arena = (uint8_t *)arena + skip;
		a->arena_len = (arena_len - skip) & ~(size_t)7;
		a->arena_hi = a->arena_len;
	}
	memset(&mf, 0, sizeof mf);
	if (size < PREAMBLE_LEN + TRAILER_LEN)
		return fail(a, TKART_E_STRUCTURE, size, "file: %llu bytes is shorter than preamble and trailer (128) (FORMAT.md, Trailer)",
		            (unsigned long long)size);
	if (memcmp(p, magic, 8) != 0)
		return fail(a, TKART_E_NOT_ARTIFACT, 0, "preamble: byte 0: wrong magic, not a ternkit artifact (FORMAT.md, Preamble)");
	major = (unsigned)p[8] | (unsigned)p[9] << 8;
	a->minor = (unsigned)p[10] | (unsigned)p[11] << 8;
	if (major != 1)
		return fail(a, TKART_E_VERSION, 8, "preamble: byte 8: major version %u (this reader reads 1) (FORMAT.md, Versioning)", major);
	if (a->minor > TKART_MINOR)
		return fail(a, TKART_E_VERSION, 10, "preamble: byte 10: minor version %u, above this reader's 1.%d (FORMAT.md, Versioning)",
		            a->minor, TKART_MINOR);
	if (le32(p + 12) != 0)
		return fail(a, TKART_E_STRUCTURE, 12, "preamble: byte 12: flags 0x%08x are not 0 (FORMAT.md, Preamble)", (unsigned)le32(p + 12));
	if (!all_zero(p + 16, 48, &at))
		return fail(a, TKART_E_STRUCTURE, 16 + at, "preamble: byte %llu: reserved byte is not 0 (FORMAT.md, Preamble)",
		            (unsigned long long)(16 + at));
	tr = p + size - TRAILER_LEN;
	if (memcmp(tr + 56, tmagic, 8) != 0)
		return fail(a, TKART_E_STRUCTURE, size - 8, "trailer: byte %llu: wrong trailer magic (FORMAT.md, Trailer)",
		            (unsigned long long)(size - 8));
	if (!all_zero(tr + 48, 8, &at))
		return fail(a, TKART_E_STRUCTURE, size - 16 + at, "trailer: byte %llu: reserved byte is not 0 (FORMAT.md, Trailer)",
		            (unsigned long long)(size - 16 + at));
	m = le64(tr);
	l = le64(tr + 8);
	if (m < PREAMBLE_LEN || m % ALIGN || m > size - TRAILER_LEN)
		return fail(a, TKART_E_STRUCTURE, size - TRAILER_LEN, "trailer: manifest offset %llu is not a multiple of 64 in [64, %llu] (FORMAT.md, Trailer)",
		            (unsigned long long)m, (unsigned long long)(size - TRAILER_LEN));
	if (l != size - TRAILER_LEN - m)
		return fail(a, TKART_E_STRUCTURE, size - TRAILER_LEN + 8, "trailer: manifest length %llu does not end at the trailer (%llu) (FORMAT.md, Trailer)",
		            (unsigned long long)l, (unsigned long long)(size - TRAILER_LEN - m));
	if (l > TKART_MANIFEST_LIMIT)
		return fail(a, TKART_E_STRUCTURE, size - TRAILER_LEN + 8, "trailer: manifest length %llu above this reader's limit %llu (FORMAT.md, Trailer)",
		            (unsigned long long)l, (unsigned long long)TKART_MANIFEST_LIMIT);
	a->manifest_offset = m;
	a->manifest_length = l;
	memcpy(a->manifest_hash, tr + 16, 32);
	tkart_blake3(p + m, (size_t)l, h);
	if (memcmp(h, a->manifest_hash, 32) != 0)
		return fail(a, TKART_E_MANIFEST_HASH, m, "manifest: byte %llu: BLAKE3 differs from the trailer's (FORMAT.md, Trailer)",
		            (unsigned long long)m);
	if (parse_manifest(a, p + m, l, &mf))
		return a->err;
	/* versioning */
	for (i = 0; i < a->ntensors; i++) {
		const tkart_tensor *t = &a->tensors[i];
		if (t->codec == TKART_ENTROPY && a->minor < 1)
			return fail(a, TKART_E_VERSION, 10, "preamble: byte 10: tensor \"%.60s\" uses codec entropy of format 1.1, the preamble says 1.%u (FORMAT.md, Versioning)",
			            t->name, a->minor);
		if (t->codec == TKART_ENTROPY)
			used = 1;
	}
	if (mf.has_sum && a->minor < 2)
		return fail(a, TKART_E_VERSION, 10, "preamble: byte 10: the recipe's sum is a key of format 1.2, the preamble says 1.%u (FORMAT.md, Versioning)",
		            a->minor);
	if (mf.has_sum && a->minor < (unsigned)mf.has_sum)
		return fail(a, TKART_E_VERSION, 10, "preamble: byte 10: the recipe's sum order blocked16 is of format 1.4, the preamble says 1.%u (FORMAT.md, Versioning)",
		            a->minor);
	if (mf.has_sum)
		used = 2;
	if (a->ncompanions && a->minor < 3)
		return fail(a, TKART_E_VERSION, 10, "preamble: byte 10: companions are a key of format 1.3, the preamble says 1.%u (FORMAT.md, Versioning)",
		            a->minor);
	if (a->ncompanions)
		used = 3;
	if (a->nspan && a->minor < 4)
		return fail(a, TKART_E_VERSION, 10, "preamble: byte 10: source_span is a key of format 1.4, the preamble says 1.%u (FORMAT.md, Versioning)",
		            a->minor);
	if (mf.has_sum > 3)
		used = (unsigned)mf.has_sum;
	{
		/* format 1.4: the minor key and piece chaining values; chunk
		 * hashes are of 1.0 to 1.3 */
		int pieces = 0, chunks = 0, s;
		for (i = 0; i < a->ntensors; i++)
			for (s = 0; s < 1 + a->tensors[i].has_scales; s++) {
				const tkart_section *sec = s ? &a->tensors[i].scales : &a->tensors[i].section;
				pieces |= sec->npiece_cvs > 0;
				chunks |= sec->nchunks > 0;
			}
		for (i = 0; i < a->ncompanions; i++) {
			pieces |= a->companions[i].section.npiece_cvs > 0;
			chunks |= a->companions[i].section.nchunks > 0;
		}
		if ((mf.has_minor || pieces) && a->minor < 4)
			return fail(a, TKART_E_VERSION, 10, "preamble: byte 10: the manifest's minor key or piece_cvs are of format 1.4, the preamble says 1.%u (FORMAT.md, Versioning)",
			            a->minor);
		if (a->minor >= 4) {
			if (!mf.has_minor || mf.minor_key != (int64_t)a->minor)
				return fail(a, TKART_E_MANIFEST, m, "manifest: the preamble says format 1.%u, the manifest has no minor key equal to it (FORMAT.md, Versioning)",
				            a->minor);
			if (chunks)
				return fail(a, TKART_E_MANIFEST, m, "manifest: chunk hashes in a file of format 1.%u, which records piece_cvs (FORMAT.md, Hashing)",
				            a->minor);
			if (a->nspan && a->nblake3)
				return fail(a, TKART_E_MANIFEST, m, "manifest: %zu tensors record source_span, the others source_blake3 (one kind for all; FORMAT.md, Source span identity)",
				            a->nspan);
			used = a->minor;
		}
	}
	if (a->minor != used)
		return fail(a, TKART_E_STRUCTURE, 10, "preamble: byte 10: preamble says format 1.%u, the manifest uses features of 1.%u only (FORMAT.md, Versioning)",
		            a->minor, used);
	/* layout */
	next = PREAMBLE_LEN;
	for (i = 0; i < a->ntensors; i++) {
		const tkart_tensor *t = &a->tensors[i];
		int s;
		for (s = 0; s < 1 + t->has_scales; s++) {
			const tkart_section *sec = s ? &t->scales : &t->section;
			if (sec->offset != next)
				return fail(a, TKART_E_STRUCTURE, m, "manifest: tensor \"%.60s\": %s section offset %llu (layout puts it at %llu) (FORMAT.md, Layout)",
				            t->name, s ? "scales" : "payload", (unsigned long long)sec->offset, (unsigned long long)next);
			if (sec->length > m - next)
				return fail(a, TKART_E_STRUCTURE, m, "manifest: tensor \"%.60s\": section of %llu bytes at %llu runs past the manifest at %llu (FORMAT.md, Layout)",
				            t->name, (unsigned long long)sec->length, (unsigned long long)next, (unsigned long long)m);
			next = align_up(sec->offset + sec->length);
		}
	}
	for (i = 0; i < a->ncompanions; i++) {
		const tkart_section *sec = &a->companions[i].section;
		if (sec->offset != next)
			return fail(a, TKART_E_STRUCTURE, m, "manifest: companion \"%.60s\": section offset %llu (layout puts it at %llu) (FORMAT.md, Layout)",
			            a->companions[i].name, (unsigned long long)sec->offset, (unsigned long long)next);
		if (sec->length > m - next)
			return fail(a, TKART_E_STRUCTURE, m, "manifest: companion \"%.60s\": section of %llu bytes at %llu runs past the manifest at %llu (FORMAT.md, Layout)",
			            a->companions[i].name, (unsigned long long)sec->length, (unsigned long long)next, (unsigned long long)m);
		next = align_up(sec->offset + sec->length);
	}
	if (next != m)
		return fail(a, TKART_E_STRUCTURE, size - TRAILER_LEN, "trailer: manifest offset %llu (layout puts it at %llu) (FORMAT.md, Layout)",
		            (unsigned long long)m, (unsigned long long)next);
	a->err = TKART_OK;
	a->errmsg[0] = 0;
	return TKART_OK;
}

const tkart_tensor *tkart_find(const tkart *a, const char *name)
{
	size_t s;
	if (!a->index_slots)
		return NULL;
	s = name_hash(name) % a->index_slots;
	while (a->index[s] != UINT32_MAX) {
		if (!strcmp(a->tensors[a->index[s]].name, name))
			return &a->tensors[a->index[s]];
		s = (s + 1) % a->index_slots;
	}
	return NULL;
}

/* ---- sections and hashes ---------------------------------------------------- */

static int tensor_index(const tkart *a, const tkart_tensor *t, size_t *i)
{
	if (!a->tensors || t < a->tensors || t >= a->tensors + a->ntensors)
		return 0;
	*i = (size_t)(t - a->tensors);
	return 1;
}

/* Checks section s (whose verified flag is flag) against its hashes. */
static int verify_hashes(tkart *a, const tkart_section *s, size_t flag, const char *what, const char *name,
                         const char *role)
{
	const uint8_t *p = a->buf + s->offset;
	uint8_t h[32];
	uint64_t k;
	if (a->verified[flag])
		return TKART_OK;
	if (s->npiece_cvs) {
		/* each piece's chaining value, compared with the record, then the
		 * records (now known to be the pieces') joined into the section's
		 * BLAKE3: each byte hashed once */
		uint8_t one[32];
		for (k = 0; k < s->npiece_cvs; k++) {
			uint64_t off = k * CHUNK, n = s->length - off < CHUNK ? s->length - off : CHUNK;
			uint32_t cv[8];
			b3_tree(p + off, (size_t)n, k * (CHUNK / 1024), 0, cv);
			b3_bytes(cv, one);
			if (memcmp(one, s->piece_cvs + 32 * k, 32) != 0)
				return fail(a, TKART_E_SECTION_HASH, s->offset + off, "%s \"%.60s\": byte %llu: %s piece %llu (bytes %llu..%llu of the section) chaining value differs from the manifest (FORMAT.md, Hashing)",
				            what, name, (unsigned long long)(s->offset + off), role, (unsigned long long)k,
				            (unsigned long long)off, (unsigned long long)(off + n));
		}
		b3_join(s->piece_cvs, s->npiece_cvs, h);
		if (memcmp(h, s->blake3, 32) != 0)
			return fail(a, TKART_E_SECTION_HASH, s->offset, "%s \"%.60s\": byte %llu: %s section BLAKE3 differs from the manifest (FORMAT.md, Hashing)",
			            what, name, (unsigned long long)s->offset, role);
		a->verified[flag] = 1;
		return TKART_OK;
	}
	tkart_blake3(p, (size_t)s->length, h);
	if (memcmp(h, s->blake3, 32) != 0)
		return fail(a, TKART_E_SECTION_HASH, s->offset, "%s \"%.60s\": byte %llu: %s section BLAKE3 differs from the manifest (FORMAT.md, Hashing)",
		            what, name, (unsigned long long)s->offset, role);
	for (k = 0; k < s->nchunks; k++) {
		uint64_t off = k * CHUNK, n = s->length - off < CHUNK ? s->length - off : CHUNK;
		tkart_blake3(p + off, (size_t)n, h);
		if (memcmp(h, s->chunks + 32 * k, 32) != 0)
			return fail(a, TKART_E_SECTION_HASH, s->offset + off, "%s \"%.60s\": byte %llu: %s chunk %llu BLAKE3 differs from the manifest (FORMAT.md, Hashing)",
			            what, name, (unsigned long long)(s->offset + off), role, (unsigned long long)k);
	}
	a->verified[flag] = 1;
	return TKART_OK;
}

static int verify_section(tkart *a, const tkart_tensor *t, int scales)
{
	size_t i;
	if (!tensor_index(a, t, &i))
		return fail(a, TKART_E_ARG, 0, "tensor is not one of this artifact's");
	return verify_hashes(a, scales ? &t->scales : &t->section, 2 * i + (size_t)scales, "section", t->name,
	                     scales ? "scales" : "payload");
}

static int verify_companion(tkart *a, const tkart_companion *c)
{
	if (!a->companions || c < a->companions || c >= a->companions + a->ncompanions)
		return fail(a, TKART_E_ARG, 0, "companion is not one of this artifact's");
	return verify_hashes(a, &c->section, 2 * a->ntensors + (size_t)(c - a->companions), "companion", c->name,
	                     "companion");
}

const tkart_companion *tkart_find_companion(const tkart *a, const char *name)
{
	size_t i;
	for (i = 0; i < a->ncompanions; i++)
		if (!strcmp(a->companions[i].name, name))
			return &a->companions[i];
	return NULL;
}

int tkart_companion_bytes(tkart *a, const tkart_companion *c, const uint8_t **bytes, uint64_t *len)
{
	int r = verify_companion(a, c);
	if (r)
		return r;
	*bytes = a->buf + c->section.offset;
	*len = c->section.length;
	return TKART_OK;
}

int tkart_verify_tensor(tkart *a, const tkart_tensor *t)
{
	int r = verify_section(a, t, 0);
	if (r == TKART_OK && t->has_scales)
		r = verify_section(a, t, 1);
	return r;
}

/* ---- codecs ----------------------------------------------------------------- */

/* The trits of each payload byte, by the codec tables of FORMAT.md
 * (code 0 -> 0, 1 -> +1, 2 -> -1, least significant first); generated.
 * A bits2 byte holding code 3 and a base3 byte above 242 are rejected
 * before their entry is used. */
static const int8_t BITS2_TRITS[256][4] = {
	{0,0,0,0}, {1,0,0,0}, {-1,0,0,0}, {0,0,0,0}, {0,1,0,0}, {1,1,0,0}, {-1,1,0,0}, {0,1,0,0},
	{0,-1,0,0}, {1,-1,0,0}, {-1,-1,0,0}, {0,-1,0,0}, {0,0,0,0}, {1,0,0,0}, {-1,0,0,0}, {0,0,0,0},
	{0,0,1,0}, {1,0,1,0}, {-1,0,1,0}, {0,0,1,0}, {0,1,1,0}, {1,1,1,0}, {-1,1,1,0}, {0,1,1,0},
	{0,-1,1,0}, {1,-1,1,0}, {-1,-1,1,0}, {0,-1,1,0}, {0,0,1,0}, {1,0,1,0}, {-1,0,1,0}, {0,0,1,0},
	{0,0,-1,0}, {1,0,-1,0}, {-1,0,-1,0}, {0,0,-1,0}, {0,1,-1,0}, {1,1,-1,0}, {-1,1,-1,0}, {0,1,-1,0},
	{0,-1,-1,0}, {1,-1,-1,0}, {-1,-1,-1,0}, {0,-1,-1,0}, {0,0,-1,0}, {1,0,-1,0}, {-1,0,-1,0}, {0,0,-1,0},
	{0,0,0,0}, {1,0,0,0}, {-1,0,0,0}, {0,0,0,0}, {0,1,0,0}, {1,1,0,0}, {-1,1,0,0}, {0,1,0,0},
	{0,-1,0,0}, {1,-1,0,0}, {-1,-1,0,0}, {0,-1,0,0}, {0,0,0,0}, {1,0,0,0}, {-1,0,0,0}, {0,0,0,0},
	{0,0,0,1}, {1,0,0,1}, {-1,0,0,1}, {0,0,0,1}, {0,1,0,1}, {1,1,0,1}, {-1,1,0,1}, {0,1,0,1},
	{0,-1,0,1}, {1,-1,0,1}, {-1,-1,0,1}, {0,-1,0,1}, {0,0,0,1}, {1,0,0,1}, {-1,0,0,1}, {0,0,0,1},
	{0,0,1,1}, {1,0,1,1}, {-1,0,1,1}, {0,0,1,1}, {0,1,1,1}, {1,1,1,1}, {-1,1,1,1}, {0,1,1,1},
	{0,-1,1,1}, {1,-1,1,1}, {-1,-1,1,1}, {0,-1,1,1}, {0,0,1,1}, {1,0,1,1}, {-1,0,1,1}, {0,0,1,1},
	{0,0,-1,1}, {1,0,-1,1}, {-1,0,-1,1}, {0,0,-1,1}, {0,1,-1,1}, {1,1,-1,1}, {-1,1,-1,1}, {0,1,-1,1},
	{0,-1,-1,1}, {1,-1,-1,1}, {-1,-1,-1,1}, {0,-1,-1,1}, {0,0,-1,1}, {1,0,-1,1}, {-1,0,-1,1}, {0,0,-1,1},
	{0,0,0,1}, {1,0,0,1}, {-1,0,0,1}, {0,0,0,1}, {0,1,0,1}, {1,1,0,1}, {-1,1,0,1}, {0,1,0,1},
	{0,-1,0,1}, {1,-1,0,1}, {-1,-1,0,1}, {0,-1,0,1}, {0,0,0,1}, {1,0,0,1}, {-1,0,0,1}, {0,0,0,1},
	{0,0,0,-1}, {1,0,0,-1}, {-1,0,0,-1}, {0,0,0,-1}, {0,1,0,-1}, {1,1,0,-1}, {-1,1,0,-1}, {0,1,0,-1},
	{0,-1,0,-1}, {1,-1,0,-1}, {-1,-1,0,-1}, {0,-1,0,-1}, {0,0,0,-1}, {1,0,0,-1}, {-1,0,0,-1}, {0,0,0,-1},
	{0,0,1,-1}, {1,0,1,-1}, {-1,0,1,-1}, {0,0,1,-1}, {0,1,1,-1}, {1,1,1,-1}, {-1,1,1,-1}, {0,1,1,-1},
	{0,-1,1,-1}, {1,-1,1,-1}, {-1,-1,1,-1}, {0,-1,1,-1}, {0,0,1,-1}, {1,0,1,-1}, {-1,0,1,-1}, {0,0,1,-1},
	{0,0,-1,-1}, {1,0,-1,-1}, {-1,0,-1,-1}, {0,0,-1,-1}, {0,1,-1,-1}, {1,1,-1,-1}, {-1,1,-1,-1}, {0,1,-1,-1},
	{0,-1,-1,-1}, {1,-1,-1,-1}, {-1,-1,-1,-1}, {0,-1,-1,-1}, {0,0,-1,-1}, {1,0,-1,-1}, {-1,0,-1,-1}, {0,0,-1,-1},
	{0,0,0,-1}, {1,0,0,-1}, {-1,0,0,-1}, {0,0,0,-1}, {0,1,0,-1}, {1,1,0,-1}, {-1,1,0,-1}, {0,1,0,-1},
	{0,-1,0,-1}, {1,-1,0,-1}, {-1,-1,0,-1}, {0,-1,0,-1}, {0,0,0,-1}, {1,0,0,-1}, {-1,0,0,-1}, {0,0,0,-1},
	{0,0,0,0}, {1,0,0,0}, {-1,0,0,0}, {0,0,0,0}, {0,1,0,0}, {1,1,0,0}, {-1,1,0,0}, {0,1,0,0},
	{0,-1,0,0}, {1,-1,0,0}, {-1,-1,0,0}, {0,-1,0,0}, {0,0,0,0}, {1,0,0,0}, {-1,0,0,0}, {0,0,0,0},
	{0,0,1,0}, {1,0,1,0}, {-1,0,1,0}, {0,0,1,0}, {0,1,1,0}, {1,1,1,0}, {-1,1,1,0}, {0,1,1,0},
	{0,-1,1,0}, {1,-1,1,0}, {-1,-1,1,0}, {0,-1,1,0}, {0,0,1,0}, {1,0,1,0}, {-1,0,1,0}, {0,0,1,0},
	{0,0,-1,0}, {1,0,-1,0}, {-1,0,-1,0}, {0,0,-1,0}, {0,1,-1,0}, {1,1,-1,0}, {-1,1,-1,0}, {0,1,-1,0},
	{0,-1,-1,0}, {1,-1,-1,0}, {-1,-1,-1,0}, {0,-1,-1,0}, {0,0,-1,0}, {1,0,-1,0}, {-1,0,-1,0}, {0,0,-1,0},
	{0,0,0,0}, {1,0,0,0}, {-1,0,0,0}, {0,0,0,0}, {0,1,0,0}, {1,1,0,0}, {-1,1,0,0}, {0,1,0,0},
	{0,-1,0,0}, {1,-1,0,0}, {-1,-1,0,0}, {0,-1,0,0}, {0,0,0,0}, {1,0,0,0}, {-1,0,0,0}, {0,0,0,0},
};

static const int8_t BASE3_TRITS[256][5] = {
	{0,0,0,0,0}, {1,0,0,0,0}, {-1,0,0,0,0}, {0,1,0,0,0}, {1,1,0,0,0}, {-1,1,0,0,0}, {0,-1,0,0,0}, {1,-1,0,0,0},
	{-1,-1,0,0,0}, {0,0,1,0,0}, {1,0,1,0,0}, {-1,0,1,0,0}, {0,1,1,0,0}, {1,1,1,0,0}, {-1,1,1,0,0}, {0,-1,1,0,0},
	{1,-1,1,0,0}, {-1,-1,1,0,0}, {0,0,-1,0,0}, {1,0,-1,0,0}, {-1,0,-1,0,0}, {0,1,-1,0,0}, {1,1,-1,0,0}, {-1,1,-1,0,0},
	{0,-1,-1,0,0}, {1,-1,-1,0,0}, {-1,-1,-1,0,0}, {0,0,0,1,0}, {1,0,0,1,0}, {-1,0,0,1,0}, {0,1,0,1,0}, {1,1,0,1,0},
	{-1,1,0,1,0}, {0,-1,0,1,0}, {1,-1,0,1,0}, {-1,-1,0,1,0}, {0,0,1,1,0}, {1,0,1,1,0}, {-1,0,1,1,0}, {0,1,1,1,0},
	{1,1,1,1,0}, {-1,1,1,1,0}, {0,-1,1,1,0}, {1,-1,1,1,0}, {-1,-1,1,1,0}, {0,0,-1,1,0}, {1,0,-1,1,0}, {-1,0,-1,1,0},
	{0,1,-1,1,0}, {1,1,-1,1,0}, {-1,1,-1,1,0}, {0,-1,-1,1,0}, {1,-1,-1,1,0}, {-1,-1,-1,1,0}, {0,0,0,-1,0}, {1,0,0,-1,0},
	{-1,0,0,-1,0}, {0,1,0,-1,0}, {1,1,0,-1,0}, {-1,1,0,-1,0}, {0,-1,0,-1,0}, {1,-1,0,-1,0}, {-1,-1,0,-1,0}, {0,0,1,-1,0},
	{1,0,1,-1,0}, {-1,0,1,-1,0}, {0,1,1,-1,0}, {1,1,1,-1,0}, {-1,1,1,-1,0}, {0,-1,1,-1,0}, {1,-1,1,-1,0}, {-1,-1,1,-1,0},
	{0,0,-1,-1,0}, {1,0,-1,-1,0}, {-1,0,-1,-1,0}, {0,1,-1,-1,0}, {1,1,-1,-1,0}, {-1,1,-1,-1,0}, {0,-1,-1,-1,0}, {1,-1,-1,-1,0},
	{-1,-1,-1,-1,0}, {0,0,0,0,1}, {1,0,0,0,1}, {-1,0,0,0,1}, {0,1,0,0,1}, {1,1,0,0,1}, {-1,1,0,0,1}, {0,-1,0,0,1},
	{1,-1,0,0,1}, {-1,-1,0,0,1}, {0,0,1,0,1}, {1,0,1,0,1}, {-1,0,1,0,1}, {0,1,1,0,1}, {1,1,1,0,1}, {-1,1,1,0,1},
	{0,-1,1,0,1}, {1,-1,1,0,1}, {-1,-1,1,0,1}, {0,0,-1,0,1}, {1,0,-1,0,1}, {-1,0,-1,0,1}, {0,1,-1,0,1}, {1,1,-1,0,1},
	{-1,1,-1,0,1}, {0,-1,-1,0,1}, {1,-1,-1,0,1}, {-1,-1,-1,0,1}, {0,0,0,1,1}, {1,0,0,1,1}, {-1,0,0,1,1}, {0,1,0,1,1},
	{1,1,0,1,1}, {-1,1,0,1,1}, {0,-1,0,1,1}, {1,-1,0,1,1}, {-1,-1,0,1,1}, {0,0,1,1,1}, {1,0,1,1,1}, {-1,0,1,1,1},
	{0,1,1,1,1}, {1,1,1,1,1}, {-1,1,1,1,1}, {0,-1,1,1,1}, {1,-1,1,1,1}, {-1,-1,1,1,1}, {0,0,-1,1,1}, {1,0,-1,1,1},
	{-1,0,-1,1,1}, {0,1,-1,1,1}, {1,1,-1,1,1}, {-1,1,-1,1,1}, {0,-1,-1,1,1}, {1,-1,-1,1,1}, {-1,-1,-1,1,1}, {0,0,0,-1,1},
	{1,0,0,-1,1}, {-1,0,0,-1,1}, {0,1,0,-1,1}, {1,1,0,-1,1}, {-1,1,0,-1,1}, {0,-1,0,-1,1}, {1,-1,0,-1,1}, {-1,-1,0,-1,1},
	{0,0,1,-1,1}, {1,0,1,-1,1}, {-1,0,1,-1,1}, {0,1,1,-1,1}, {1,1,1,-1,1}, {-1,1,1,-1,1}, {0,-1,1,-1,1}, {1,-1,1,-1,1},
	{-1,-1,1,-1,1}, {0,0,-1,-1,1}, {1,0,-1,-1,1}, {-1,0,-1,-1,1}, {0,1,-1,-1,1}, {1,1,-1,-1,1}, {-1,1,-1,-1,1}, {0,-1,-1,-1,1},
	{1,-1,-1,-1,1}, {-1,-1,-1,-1,1}, {0,0,0,0,-1}, {1,0,0,0,-1}, {-1,0,0,0,-1}, {0,1,0,0,-1}, {1,1,0,0,-1}, {-1,1,0,0,-1},
	{0,-1,0,0,-1}, {1,-1,0,0,-1}, {-1,-1,0,0,-1}, {0,0,1,0,-1}, {1,0,1,0,-1}, {-1,0,1,0,-1}, {0,1,1,0,-1}, {1,1,1,0,-1},
	{-1,1,1,0,-1}, {0,-1,1,0,-1}, {1,-1,1,0,-1}, {-1,-1,1,0,-1}, {0,0,-1,0,-1}, {1,0,-1,0,-1}, {-1,0,-1,0,-1}, {0,1,-1,0,-1},
	{1,1,-1,0,-1}, {-1,1,-1,0,-1}, {0,-1,-1,0,-1}, {1,-1,-1,0,-1}, {-1,-1,-1,0,-1}, {0,0,0,1,-1}, {1,0,0,1,-1}, {-1,0,0,1,-1},
	{0,1,0,1,-1}, {1,1,0,1,-1}, {-1,1,0,1,-1}, {0,-1,0,1,-1}, {1,-1,0,1,-1}, {-1,-1,0,1,-1}, {0,0,1,1,-1}, {1,0,1,1,-1},
	{-1,0,1,1,-1}, {0,1,1,1,-1}, {1,1,1,1,-1}, {-1,1,1,1,-1}, {0,-1,1,1,-1}, {1,-1,1,1,-1}, {-1,-1,1,1,-1}, {0,0,-1,1,-1},
	{1,0,-1,1,-1}, {-1,0,-1,1,-1}, {0,1,-1,1,-1}, {1,1,-1,1,-1}, {-1,1,-1,1,-1}, {0,-1,-1,1,-1}, {1,-1,-1,1,-1}, {-1,-1,-1,1,-1},
	{0,0,0,-1,-1}, {1,0,0,-1,-1}, {-1,0,0,-1,-1}, {0,1,0,-1,-1}, {1,1,0,-1,-1}, {-1,1,0,-1,-1}, {0,-1,0,-1,-1}, {1,-1,0,-1,-1},
	{-1,-1,0,-1,-1}, {0,0,1,-1,-1}, {1,0,1,-1,-1}, {-1,0,1,-1,-1}, {0,1,1,-1,-1}, {1,1,1,-1,-1}, {-1,1,1,-1,-1}, {0,-1,1,-1,-1},
	{1,-1,1,-1,-1}, {-1,-1,1,-1,-1}, {0,0,-1,-1,-1}, {1,0,-1,-1,-1}, {-1,0,-1,-1,-1}, {0,1,-1,-1,-1}, {1,1,-1,-1,-1}, {-1,1,-1,-1,-1},
	{0,-1,-1,-1,-1}, {1,-1,-1,-1,-1}, {-1,-1,-1,-1,-1}, {0,0,0,0,0}, {0,0,0,0,0}, {0,0,0,0,0}, {0,0,0,0,0}, {0,0,0,0,0},
	{0,0,0,0,0}, {0,0,0,0,0}, {0,0,0,0,0}, {0,0,0,0,0}, {0,0,0,0,0}, {0,0,0,0,0}, {0,0,0,0,0}, {0,0,0,0,0},
};

/* unpack is tkart_unpack_trits, and sets *bad to the index of an invalid
 * byte. Whole bytes go through the tables; a range that starts or ends
 * inside a byte takes its digits one by one. */
static int unpack(int codec, const uint8_t *p, uint64_t len, uint64_t n, uint64_t first, uint64_t count,
                  int8_t *dst, uint64_t *bad)
{
	static const uint8_t pow3[6] = {1, 3, 9, 27, 81, 243};
	uint64_t i = first, end = first + count;
	unsigned per = codec == TKART_BITS2 ? 4 : 5;
	if (first > n || count > n - first)
		return TKART_E_ARG;
	if (codec != TKART_BITS2 && codec != TKART_BASE3)
		return TKART_E_ARG;
	if (len != (n + per - 1) / per) {
		*bad = len;
		return TKART_E_PAYLOAD;
	}
	while (i < end) {
		uint64_t j = i / per, k = i % per;
		uint8_t b = p[j];
		if (k == 0 && end - i >= per) {
			/* whole bytes */
			uint64_t jend = j + (end - i) / per, q;
			int8_t *d = dst + (i - first);
			unsigned acc = 0;
			if (codec == TKART_BITS2) {
				for (q = j; q < jend; q++, d += 4) {
					uint8_t c = p[q];
					acc |= c & (c >> 1) & 0x55u;
					memcpy(d, BITS2_TRITS[c], 4);
				}
			} else {
				for (q = j; q < jend; q++, d += 5) {
					uint8_t c = p[q];
					acc |= c > 242;
					memcpy(d, BASE3_TRITS[c], 5);
				}
			}
			if (acc) {
				for (q = j; q < jend; q++)
					if (codec == TKART_BITS2 ? (p[q] & (p[q] >> 1) & 0x55) != 0 : p[q] > 242)
						break;
				*bad = q;
				return TKART_E_PAYLOAD;
			}
			i += (jend - j) * per;
			continue;
		}
		if (codec == TKART_BITS2 ? (b & (b >> 1) & 0x55) != 0 : b > 242) {
			*bad = j;
			return TKART_E_PAYLOAD;
		}
		for (; k < per && i < end; k++, i++)
			dst[i - first] = codec == TKART_BITS2 ? BITS2_TRITS[b][k] : BASE3_TRITS[b][k];
	}
	/* the padding of the last byte, when it was read: pairs or digits past n are 0 */
	if (count && end == n && n % per) {
		uint8_t last = p[len - 1];
		if (codec == TKART_BITS2 ? (last >> (2 * (n % 4))) != 0 : last >= pow3[n % 5]) {
			*bad = len - 1;
			return TKART_E_PAYLOAD;
		}
	}
	return TKART_OK;
}

int tkart_unpack_trits(int codec, const uint8_t *p, uint64_t len, uint64_t n, uint64_t first, uint64_t count,
                       int8_t *dst)
{
	uint64_t bad;
	return unpack(codec, p, len, n, first, count, dst, &bad);
}

/* One sum per group of `group` columns (group divides cols; cols gives one
 * sum per row): y[r·(cols/group) + g], r < nrows. */
static int matvec(int codec, const uint8_t *p, uint64_t len, uint64_t n, uint64_t cols, uint64_t group,
                  uint64_t row0, uint64_t nrows, const int8_t *x, int32_t *y, uint64_t *bad)
{
	int8_t buf[1024];
	uint64_t r, per;
	if (cols == 0)
		return nrows == 0 || n == 0 ? TKART_OK : TKART_E_ARG; /* no column, no sum */
	if (group == 0 || cols % group != 0)
		return TKART_E_ARG;
	if (row0 > n / cols || nrows > n / cols - row0)
		return TKART_E_ARG;
	per = cols / group;
	for (r = 0; r < nrows; r++) {
		uint64_t c = 0, start = (row0 + r) * cols;
		uint32_t acc = 0; /* wraps like a two's complement int32 */
		while (c < cols) {
			/* up to the buffer's size, not past the group's end */
			uint64_t k, m = cols - c < sizeof buf ? cols - c : sizeof buf, end = (c / group + 1) * group;
			int e;
			if (m > end - c)
				m = end - c;
			e = unpack(codec, p, len, n, start + c, m, buf, bad);
			if (e)
				return e;
			for (k = 0; k < m; k++)
				acc += (uint32_t)(int32_t)(buf[k] * x[c + k]);
			c += m;
			if (c == end) {
				y[r * per + c / group - 1] = (int32_t)acc;
				acc = 0;
			}
		}
	}
	return TKART_OK;
}

int tkart_matvec_packed(int codec, const uint8_t *p, uint64_t len, uint64_t n, uint64_t cols, uint64_t row0,
                        uint64_t nrows, const int8_t *x, int32_t *y)
{
	uint64_t bad;
	if (cols == 0) {
		uint64_t r;
		for (r = 0; r < nrows; r++)
			y[r] = 0;
		return TKART_OK;
	}
	return matvec(codec, p, len, n, cols, cols, row0, nrows, x, y, &bad);
}

int tkart_matvec_packed_groups(int codec, const uint8_t *p, uint64_t len, uint64_t n, uint64_t cols, uint64_t group,
                               uint64_t row0, uint64_t nrows, const int8_t *x, int32_t *y)
{
	uint64_t bad;
	return matvec(codec, p, len, n, cols, group, row0, nrows, x, y, &bad);
}

/* ---- entropy ---------------------------------------------------------------- */

/* The frame rules of FORMAT.md, "entropy", before anything is decoded. */
static int check_frame(tkart *a, const tkart_tensor *t, const uint8_t *p, uint64_t len, uint64_t b)
{
	uint64_t off, size = 0, stored = 0, at = t->section.offset;
	unsigned fhd, width;
#define NO(...) return fail(a, TKART_E_PAYLOAD, at, __VA_ARGS__)
	if (len < 9)
		NO("section \"%.60s\": byte %llu: entropy frame of %llu bytes (FORMAT.md, entropy)", t->name, (unsigned long long)at, (unsigned long long)len);
	if (p[0] != 0x28 || p[1] != 0xB5 || p[2] != 0x2F || p[3] != 0xFD)
		NO("section \"%.60s\": byte %llu: entropy frame magic %02x%02x%02x%02x (FORMAT.md, entropy)", t->name, (unsigned long long)at, p[0], p[1], p[2], p[3]);
	fhd = p[4];
	if (!(fhd & 0x20) || (fhd & 0x1F))
		NO("section \"%.60s\": byte %llu: entropy frame descriptor 0x%02x (FORMAT.md, entropy)", t->name, (unsigned long long)(at + 4), fhd);
	width = (unsigned[]){1, 2, 4, 8}[fhd >> 6];
	if (len < 5 + width + 3)
		NO("section \"%.60s\": entropy frame truncated in its header (FORMAT.md, entropy)", t->name);
	{
		unsigned i;
		for (i = 0; i < width; i++)
			size |= (uint64_t)p[5 + i] << (8 * i);
		if (width == 2)
			size += 256;
	}
	if (size != b)
		NO("section \"%.60s\": byte %llu: entropy content size %llu, the base3 payload is %llu bytes (FORMAT.md, entropy)",
		   t->name, (unsigned long long)(at + 5), (unsigned long long)size, (unsigned long long)b);
	off = 5 + width;
	for (;;) {
		uint32_t h;
		unsigned last, type;
		uint64_t bsize, body;
		if (len - off < 3)
			NO("section \"%.60s\": byte %llu: entropy frame truncated before a block header (FORMAT.md, entropy)", t->name, (unsigned long long)(at + off));
		h = (uint32_t)p[off] | (uint32_t)p[off + 1] << 8 | (uint32_t)p[off + 2] << 16;
		last = h & 1;
		type = h >> 1 & 3;
		bsize = h >> 3;
		if (type == 3)
			NO("section \"%.60s\": byte %llu: reserved block type (FORMAT.md, entropy)", t->name, (unsigned long long)(at + off));
		if (bsize > ENTROPY_BLOCK_MAX)
			NO("section \"%.60s\": byte %llu: block size %llu (FORMAT.md, entropy)", t->name, (unsigned long long)(at + off), (unsigned long long)bsize);
		body = type == 1 ? 1 : bsize;
		if (type <= 1) {
			stored += bsize;
			if (stored > size)
				NO("section \"%.60s\": byte %llu: blocks hold more than the content size (FORMAT.md, entropy)", t->name, (unsigned long long)(at + off));
		}
		off += 3;
		if (len - off < body)
			NO("section \"%.60s\": byte %llu: truncated block (FORMAT.md, entropy)", t->name, (unsigned long long)(at + off));
		off += body;
		if (last)
			break;
	}
	if (off != len)
		NO("section \"%.60s\": byte %llu: %llu bytes after the entropy frame (FORMAT.md, entropy)", t->name,
		   (unsigned long long)(at + off), (unsigned long long)(len - off));
#undef NO
	return TKART_OK;
}

size_t tkart_scratch_size(const tkart_tensor *t)
{
	return t->kind == TKART_TERNARY && t->codec == TKART_ENTROPY ? (size_t)(((uint64_t)t->n + 4) / 5) : 0;
}

/* The packed (bits2 or base3) payload of a verified ternary tensor:
 * entropy frames are checked and decoded into scratch. */
static int packed_payload(tkart *a, const tkart_tensor *t, void *scratch, size_t scratch_len, const uint8_t **pp,
                          uint64_t *plen, int *codec)
{
	const uint8_t *p;
	uint64_t b = ((uint64_t)t->n + 4) / 5;
	int r;
	if (t->kind != TKART_TERNARY)
		return fail(a, TKART_E_ARG, 0, "tensor \"%.60s\" is %s, not ternary", t->name, tkart_kind_name(t->kind));
	r = verify_section(a, t, 0);
	if (r)
		return r;
	p = a->buf + t->section.offset;
	if (t->codec != TKART_ENTROPY) {
		*pp = p;
		*plen = t->section.length;
		*codec = t->codec;
		return TKART_OK;
	}
	r = check_frame(a, t, p, t->section.length, b);
	if (r)
		return r;
	if (scratch_len < b)
		return fail(a, TKART_E_ARG, 0, "tensor \"%.60s\": scratch of %lu bytes, the entropy payload needs %llu",
		            t->name, (unsigned long)scratch_len, (unsigned long long)b);
#ifdef TKART_WITH_ZSTD
	{
		static uint8_t none[1]; /* a frame of no content may come with no scratch */
		size_t got = ZSTD_decompress(b ? scratch : none, (size_t)b, p, (size_t)t->section.length);
		if (ZSTD_isError(got))
			return fail(a, TKART_E_PAYLOAD, t->section.offset, "section \"%.60s\": byte %llu: entropy frame: %s (FORMAT.md, entropy)",
			            t->name, (unsigned long long)t->section.offset, ZSTD_getErrorName(got));
		if (got != b)
			return fail(a, TKART_E_PAYLOAD, t->section.offset, "section \"%.60s\": byte %llu: entropy frame decodes to %lu bytes, want %llu (FORMAT.md, entropy)",
			            t->name, (unsigned long long)t->section.offset, (unsigned long)got, (unsigned long long)b);
	}
	*pp = b ? (const uint8_t *)scratch : p; /* nothing is read for b = 0 */
	*plen = b;
	*codec = TKART_BASE3;
	return TKART_OK;
#else
	(void)scratch;
	return fail(a, TKART_E_UNSUPPORTED, t->section.offset, "section \"%.60s\": the entropy codec is not supported by this build (compile with -DTKART_WITH_ZSTD and link libzstd)",
	            t->name);
#endif
}

/* An invalid byte at index bad of a packed payload: in the file, or in the
 * content of an entropy frame. */
static int payload_error(tkart *a, const tkart_tensor *t, int codec, uint64_t bad)
{
	const char *rule = codec == TKART_BITS2 ? "a pair equal to 3 or a nonzero padding pair (FORMAT.md, bits2)"
	                                        : "a byte above 242 or a last byte not below 3^r (FORMAT.md, base3)";
	if (t->codec == TKART_ENTROPY)
		return fail(a, TKART_E_PAYLOAD, t->section.offset, "section \"%.60s\": byte %llu: entropy frame content byte %llu: invalid %s payload: %s",
		            t->name, (unsigned long long)t->section.offset, (unsigned long long)bad, tkart_codec_name(codec), rule);
	return fail(a, TKART_E_PAYLOAD, t->section.offset + bad, "section \"%.60s\": byte %llu: invalid %s payload: %s", t->name,
	            (unsigned long long)(t->section.offset + bad), tkart_codec_name(codec), rule);
}

int tkart_decode_trits(tkart *a, const tkart_tensor *t, int64_t row0, int64_t nrows, int8_t *dst, void *scratch,
                       size_t scratch_len)
{
	const uint8_t *p;
	uint64_t len, bad = 0;
	int codec, r;
	if (t->kind != TKART_TERNARY)
		return fail(a, TKART_E_ARG, 0, "tensor \"%.60s\" is %s, not ternary", t->name, tkart_kind_name(t->kind));
	if (row0 < 0 || nrows < 0 || row0 > t->rows || nrows > t->rows - row0)
		return fail(a, TKART_E_ARG, 0, "tensor \"%.60s\": rows %lld+%lld outside its %lld rows", t->name,
		            (long long)row0, (long long)nrows, (long long)t->rows);
	r = packed_payload(a, t, scratch, scratch_len, &p, &len, &codec);
	if (r)
		return r;
	r = unpack(codec, p, len, (uint64_t)t->n, (uint64_t)row0 * (uint64_t)t->cols, (uint64_t)nrows * (uint64_t)t->cols,
	           dst, &bad);
	if (r == TKART_E_PAYLOAD)
		return payload_error(a, t, codec, bad);
	if (r)
		return fail(a, r, 0, "tensor \"%.60s\": bad range", t->name);
	return TKART_OK;
}

int tkart_matvec(tkart *a, const tkart_tensor *t, int64_t row0, int64_t nrows, const int8_t *x, int32_t *y,
                 void *scratch, size_t scratch_len)
{
	const uint8_t *p;
	uint64_t len, bad = 0;
	int codec, r;
	if (t->kind != TKART_TERNARY)
		return fail(a, TKART_E_ARG, 0, "tensor \"%.60s\" is %s, not ternary", t->name, tkart_kind_name(t->kind));
	if (row0 < 0 || nrows < 0 || row0 > t->rows || nrows > t->rows - row0)
		return fail(a, TKART_E_ARG, 0, "tensor \"%.60s\": rows %lld+%lld outside its %lld rows", t->name,
		            (long long)row0, (long long)nrows, (long long)t->rows);
	r = packed_payload(a, t, scratch, scratch_len, &p, &len, &codec);
	if (r)
		return r;
	if (t->cols == 0) {
		int64_t k;
		for (k = 0; k < nrows; k++)
			y[k] = 0;
		return TKART_OK;
	}
	r = matvec(codec, p, len, (uint64_t)t->n, (uint64_t)t->cols, (uint64_t)t->cols, (uint64_t)row0, (uint64_t)nrows,
	           x, y, &bad);
	if (r == TKART_E_PAYLOAD)
		return payload_error(a, t, codec, bad);
	if (r)
		return fail(a, r, 0, "tensor \"%.60s\": bad range", t->name);
	return TKART_OK;
}

static int check_scales(tkart *a, const tkart_tensor *t, float *dst, size_t cap)
{
	const uint8_t *p = a->buf + t->scales.offset;
	int64_t i;
	for (i = 0; i < t->nscales; i++) {
		uint32_t u = le32(p + 4 * i);
		float f;
		memcpy(&f, &u, 4);
		if (t->kind == TKART_TERNARY ? !(f > 0) || isinf(f) : !(f >= 0) || isinf(f))
			return fail(a, TKART_E_PAYLOAD, t->scales.offset + 4 * (uint64_t)i,
			            "section \"%.60s\": byte %llu: %s scale %lld is %g, not finite and %s (FORMAT.md, Scales sections)",
			            t->name, (unsigned long long)(t->scales.offset + 4 * (uint64_t)i), tkart_kind_name(t->kind),
			            (long long)i, (double)f, t->kind == TKART_TERNARY ? "> 0" : ">= 0");
		if (dst && (size_t)i < cap)
			dst[i] = f;
	}
	return TKART_OK;
}

int tkart_read_scales(tkart *a, const tkart_tensor *t, float *dst, size_t cap)
{
	int r;
	if (t->kind == TKART_KEPT)
		return fail(a, TKART_E_ARG, 0, "tensor \"%.60s\" is kept: no scales", t->name);
	if (cap < (size_t)t->nscales)
		return fail(a, TKART_E_ARG, 0, "tensor \"%.60s\": room for %lu scales, it has %lld", t->name,
		            (unsigned long)cap, (long long)t->nscales);
	if (!t->has_scales) {
		if (t->nscales)
			dst[0] = t->scale;
		return TKART_OK;
	}
	r = verify_section(a, t, 1);
	if (r)
		return r;
	return check_scales(a, t, dst, cap);
}

int tkart_int8_codes(tkart *a, const tkart_tensor *t, const int8_t **codes)
{
	const uint8_t *p;
	uint64_t i;
	int r;
	if (t->kind != TKART_INT8)
		return fail(a, TKART_E_ARG, 0, "tensor \"%.60s\" is %s, not int8", t->name, tkart_kind_name(t->kind));
	r = verify_section(a, t, 0);
	if (r)
		return r;
	p = a->buf + t->section.offset;
	for (i = 0; i < t->section.length; i++)
		if (p[i] == 0x80)
			return fail(a, TKART_E_PAYLOAD, t->section.offset + i, "section \"%.60s\": byte %llu: int8 code -128 (codes are -127..127) (FORMAT.md, raw)",
			            t->name, (unsigned long long)(t->section.offset + i));
	*codes = (const int8_t *)(const void *)p;
	return TKART_OK;
}

int tkart_kept_bytes(tkart *a, const tkart_tensor *t, const uint8_t **bytes, uint64_t *len)
{
	int r;
	if (t->kind != TKART_KEPT)
		return fail(a, TKART_E_ARG, 0, "tensor \"%.60s\" is %s, not kept", t->name, tkart_kind_name(t->kind));
	r = verify_section(a, t, 0);
	if (r)
		return r;
	*bytes = a->buf + t->section.offset;
	*len = t->section.length;
	return TKART_OK;
}

/* ---- values ------------------------------------------------------------------ */

static float f32_of_bits(uint32_t u)
{
	float f;
	memcpy(&f, &u, 4);
	return f;
}

/* IEEE 754 binary16 to binary32, exactly. */
static float half_to_float(uint16_t h)
{
	uint32_t sign = (uint32_t)(h & 0x8000u) << 16, e = (uint32_t)(h >> 10) & 0x1F, m = h & 0x3FFu;
	if (e == 0x1F)
		return f32_of_bits(sign | 0x7F800000u | m << 13);
	if (e == 0) {
		uint32_t k = 0;
		if (m == 0)
			return f32_of_bits(sign);
		while (!(m & 0x400)) { /* a subnormal: m × 2^-24, normalized */
			m <<= 1;
			k++;
		}
		return f32_of_bits(sign | (113 - k) << 23 | (m & 0x3FF) << 13);
	}
	return f32_of_bits(sign | (e + 112) << 23 | m << 13);
}

/* F8_E4M3 (FORMAT.md, raw): bias 7, no infinities, S.1111.111 NaN,
 * exponent 0 the subnormals m × 2^-9. */
static float e4m3_to_float(uint8_t b)
{
	int e = b >> 3 & 0xF, m = b & 7;
	float v;
	if (e == 0xF && m == 7)
		return f32_of_bits(0x7FC00000u);
	/* normal: (1 + m/8) × 2^(e-7), built from its bits; subnormal: m × 2^-9 */
	v = e == 0 ? (float)m * (1.0f / 512) : f32_of_bits((uint32_t)(e + 120) << 23 | (uint32_t)m << 20);
	return b & 0x80 ? -v : v;
}

int tkart_values(tkart *a, const tkart_tensor *t, int64_t first, int64_t count, float *dst, void *scratch,
                 size_t scratch_len)
{
	int64_t i;
	int r;
	if (first < 0 || count < 0 || first > t->n || count > t->n - first)
		return fail(a, TKART_E_ARG, 0, "tensor \"%.60s\": elements %lld+%lld outside its %lld", t->name,
		            (long long)first, (long long)count, (long long)t->n);
	if (t->kind == TKART_KEPT) {
		const uint8_t *p;
		uint64_t len;
		const char *d = t->dtype;
		int size = dtype_size(d);
		if (!is_float_dtype(d))
			return fail(a, TKART_E_ARG, 0, "tensor \"%.60s\": kept dtype %s is not a float dtype", t->name, d);
		r = tkart_kept_bytes(a, t, &p, &len);
		if (r)
			return r;
		p += (uint64_t)first * (uint64_t)size;
		for (i = 0; i < count; i++, p += size) {
			if (!strcmp(d, "F32"))
				dst[i] = f32_of_bits(le32(p));
			else if (!strcmp(d, "F64")) {
				uint64_t u = le64(p);
				double v;
				memcpy(&v, &u, 8);
				dst[i] = (float)v;
			} else if (!strcmp(d, "F16"))
				dst[i] = half_to_float((uint16_t)(p[0] | p[1] << 8));
			else if (!strcmp(d, "BF16"))
				dst[i] = f32_of_bits((uint32_t)p[0] << 16 | (uint32_t)p[1] << 24);
			else if (!strcmp(d, "F8_E5M2"))
				dst[i] = half_to_float((uint16_t)(p[0] << 8));
			else
				dst[i] = e4m3_to_float(p[0]);
		}
		return TKART_OK;
	}
	if (t->has_scales) {
		r = verify_section(a, t, 1);
		if (r == TKART_OK)
			r = check_scales(a, t, NULL, 0);
		if (r)
			return r;
	}
	if (t->kind == TKART_INT8) {
		const int8_t *c;
		const uint8_t *sp = a->buf + t->scales.offset;
		r = tkart_int8_codes(a, t, &c);
		if (r)
			return r;
		for (i = 0; i < count; i++) {
			int64_t e = first + i;
			dst[i] = f32_of_bits(le32(sp + 4 * (e / t->cols))) * (float)c[e];
		}
		return TKART_OK;
	}
	{
		const uint8_t *p, *sp = a->buf + t->scales.offset;
		uint64_t len, bad = 0;
		int codec;
		int8_t buf[1024];
		r = packed_payload(a, t, scratch, scratch_len, &p, &len, &codec);
		if (r)
			return r;
		for (i = 0; i < count; i += (int64_t)sizeof buf) {
			int64_t m = count - i < (int64_t)sizeof buf ? count - i : (int64_t)sizeof buf, k;
			r = unpack(codec, p, len, (uint64_t)t->n, (uint64_t)(first + i), (uint64_t)m, buf, &bad);
			if (r == TKART_E_PAYLOAD)
				return payload_error(a, t, codec, bad);
			if (r)
				return fail(a, r, 0, "tensor \"%.60s\": bad range", t->name);
			for (k = 0; k < m; k++) {
				float s = t->has_scales ? f32_of_bits(le32(sp + 4 * ((first + i + k) / t->group))) : t->scale;
				dst[i + k] = s * (float)buf[k];
			}
		}
	}
	return TKART_OK;
}

/* ---- check ------------------------------------------------------------------- */

int tkart_check(tkart *a, void *scratch, size_t scratch_len)
{
	size_t i;
	uint64_t at;
	if (a->ntensors == 0 && a->ncompanions == 0) {
		if (!all_zero(a->buf + PREAMBLE_LEN, a->manifest_offset - PREAMBLE_LEN, &at))
			return fail(a, TKART_E_STRUCTURE, PREAMBLE_LEN + at, "padding: byte %llu: padding byte is not 0 (FORMAT.md, Layout)",
			            (unsigned long long)(PREAMBLE_LEN + at));
		return TKART_OK;
	}
	int unsupported = 0;
	for (i = 0; i < a->ntensors; i++) {
		const tkart_tensor *t = &a->tensors[i];
		int s, r;
		for (s = 0; s < 1 + t->has_scales; s++) {
			const tkart_section *sec = s ? &t->scales : &t->section;
			uint64_t end = sec->offset + sec->length, next;
			if (s == 0 && t->has_scales)
				next = t->scales.offset;
			else if (i + 1 < a->ntensors)
				next = a->tensors[i + 1].section.offset;
			else if (a->ncompanions)
				next = a->companions[0].section.offset;
			else
				next = a->manifest_offset;
			if (next > end && !all_zero(a->buf + end, next - end, &at))
				return fail(a, TKART_E_STRUCTURE, end + at, "padding: byte %llu: padding byte 0x%02x is not 0 (FORMAT.md, Layout)",
				            (unsigned long long)(end + at), a->buf[end + at]);
			r = verify_section(a, t, s);
			if (r)
				return r;
			if (s == 1) {
				r = check_scales(a, t, NULL, 0);
			} else if (t->kind == TKART_INT8) {
				const int8_t *c;
				r = tkart_int8_codes(a, t, &c);
			} else if (t->kind == TKART_TERNARY) {
				const uint8_t *p;
				uint64_t len, k, bad = 0, cnt[3] = {0, 0, 0};
				int codec;
				int8_t buf[4096];
				r = packed_payload(a, t, scratch, scratch_len, &p, &len, &codec);
				if (r == TKART_E_UNSUPPORTED) {
					/* the frame rules held; check the rest, then report */
					unsupported = 1;
					continue;
				}
				for (k = 0; r == 0 && k < (uint64_t)t->n; k += sizeof buf) {
					uint64_t m = (uint64_t)t->n - k < sizeof buf ? (uint64_t)t->n - k : sizeof buf, q;
					r = unpack(codec, p, len, (uint64_t)t->n, k, m, buf, &bad);
					if (r == TKART_E_PAYLOAD)
						return payload_error(a, t, codec, bad);
					for (q = 0; q < m; q++)
						cnt[buf[q] + 1]++;
				}
				if (r == 0 && (cnt[0] != (uint64_t)t->neg || cnt[1] != (uint64_t)t->zero || cnt[2] != (uint64_t)t->pos))
					return fail(a, TKART_E_COUNTS, t->section.offset,
					            "section \"%.60s\": byte %llu: decoded trits neg %llu zero %llu pos %llu, the manifest records %lld %lld %lld (FORMAT.md, What a reader must reject)",
					            t->name, (unsigned long long)t->section.offset, (unsigned long long)cnt[0],
					            (unsigned long long)cnt[1], (unsigned long long)cnt[2], (long long)t->neg,
					            (long long)t->zero, (long long)t->pos);
			}
			if (r)
				return r;
		}
	}
	for (i = 0; i < a->ncompanions; i++) {
		const tkart_section *sec = &a->companions[i].section;
		uint64_t end = sec->offset + sec->length,
		         next = i + 1 < a->ncompanions ? a->companions[i + 1].section.offset : a->manifest_offset;
		int r;
		if (next > end && !all_zero(a->buf + end, next - end, &at))
			return fail(a, TKART_E_STRUCTURE, end + at, "padding: byte %llu: padding byte 0x%02x is not 0 (FORMAT.md, Layout)",
			            (unsigned long long)(end + at), a->buf[end + at]);
		r = verify_companion(a, &a->companions[i]);
		if (r)
			return r;
	}
	if (unsupported)
		return fail(a, TKART_E_UNSUPPORTED, 0, "the entropy codec is not supported by this build (compile with -DTKART_WITH_ZSTD and link libzstd); every other rule holds");
	a->err = TKART_OK;
	a->errmsg[0] = 0;
	return TKART_OK;
}
