/* tkart-check: checks ternkit artifacts with the C reader and lists their
 * tensors; a smoke test for a device.
 *
 *   tkart-check FILE...                   check and list; exit 0 ok, 1 invalid, 2 usage or I/O
 *   tkart-check --json [--trits] FILE...  the outcome as JSON (with --trits: trits, codes, kept
 *                                         bytes and scales), exit 0 unless a file is unreadable
 *   tkart-check --rows FILE NAME ROW0 NROWS        trits of those rows as "-0+"
 *   tkart-check --matvec FILE NAME ROW0 NROWS X    y = W[rows] x, X a file of int8 values
 *   tkart-check --mulint8 CODEC ROWS COLS GROUP HEX TOKENS X   a bare payload's group sums
 *   tkart-check --blake3 FILE             BLAKE3 of the file
 *   tkart-check --bench                   decode and matvec speed on synthetic trits
 *   tkart-check --mutate BUDGET FILE...   about BUDGET truncations and byte flips of each file,
 *                                         for sanitizer builds
 */
#include "tkart.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

static int read_file(const char *path, uint8_t **buf, uint64_t *size)
{
	FILE *f = fopen(path, "rb");
	long n;
	if (!f)
		return 0;
	if (fseek(f, 0, SEEK_END) != 0 || (n = ftell(f)) < 0 || fseek(f, 0, SEEK_SET) != 0) {
		fclose(f);
		return 0;
	}
	/* an exact-size allocation, so that a sanitizer catches any read past the end */
	*buf = malloc(n ? (size_t)n : 1);
	if (!*buf || fread(*buf, 1, (size_t)n, f) != (size_t)n) {
		free(*buf);
		fclose(f);
		return 0;
	}
	fclose(f);
	*size = (uint64_t)n;
	return 1;
}

/* One artifact, opened and checked. */
typedef struct {
	uint8_t *data;
	void *arena, *scratch;
	size_t scratch_len;
	tkart a;
	int rc;
} art;

static int load(art *t, const char *path)
{
	size_t i;
	uint64_t size;
	memset(t, 0, sizeof *t);
	if (!read_file(path, &t->data, &size)) {
		fprintf(stderr, "tkart-check: %s: cannot read the file\n", path);
		return 0;
	}
	t->arena = malloc(tkart_arena_size(t->data, size));
	if (!t->arena) {
		fprintf(stderr, "tkart-check: %s: out of memory\n", path);
		return 0;
	}
	t->rc = tkart_open(&t->a, t->data, size, t->arena, tkart_arena_size(t->data, size));
	if (t->rc == TKART_OK) {
		for (i = 0; i < t->a.ntensors; i++)
			if (tkart_scratch_size(&t->a.tensors[i]) > t->scratch_len)
				t->scratch_len = tkart_scratch_size(&t->a.tensors[i]);
		t->scratch = malloc(t->scratch_len ? t->scratch_len : 1);
		if (!t->scratch) {
			fprintf(stderr, "tkart-check: %s: out of memory\n", path);
			return 0;
		}
		t->rc = tkart_check(&t->a, t->scratch, t->scratch_len);
	}
	return 1;
}

static void unload(art *t)
{
	free(t->data);
	free(t->arena);
	free(t->scratch);
}

static void json_str(const char *s)
{
	putchar('"');
	for (; *s; s++) {
		unsigned char c = (unsigned char)*s;
		if (c == '"' || c == '\\')
			printf("\\%c", c);
		else if (c < 0x20)
			printf("\\u%04x", c);
		else
			putchar(c);
	}
	putchar('"');
}

/* Text from the file, printed with control characters escaped, so that a
 * name cannot drive the terminal. */
static void put_safe(FILE *f, const char *s)
{
	for (; *s; s++) {
		unsigned char c = (unsigned char)*s;
		if (c < 0x20 || c == 0x7F)
			fprintf(f, "\\x%02x", c);
		else
			fputc(c, f);
	}
}

static void print_shape(const tkart_tensor *t, const char *open, const char *sep, const char *close)
{
	int k;
	printf("%s", open);
	for (k = 0; k < t->ndim; k++)
		printf("%s%lld", k ? sep : "", (long long)t->shape[k]);
	printf("%s", close);
}

static void hex(const uint8_t *p, uint64_t n)
{
	uint64_t i;
	for (i = 0; i < n; i++)
		printf("%02x", p[i]);
}

/* The JSON form of testdata/tkart_read.py, without its digests. */
static int json_file(const char *path, int with_trits)
{
	art f;
	size_t i;
	if (!load(&f, path)) {
		unload(&f);
		return 0;
	}
	printf("{\"file\": ");
	json_str(path);
	if (f.rc != TKART_OK) {
		printf(", \"result\": \"%s\", \"detail\": ", tkart_class(f.rc));
		json_str(tkart_errmsg(&f.a));
		printf("}");
		unload(&f);
		return 1;
	}
	printf(", \"result\": \"ok\", \"version\": \"1.%u\", \"tensors\": [", f.a.minor);
	for (i = 0; i < f.a.ntensors; i++) {
		const tkart_tensor *t = &f.a.tensors[i];
		int rc = TKART_OK;
		printf("%s\n {\"name\": ", i ? "," : "");
		json_str(t->name);
		printf(", \"kind\": \"%s\", \"codec\": \"%s\", \"shape\": ", tkart_kind_name(t->kind), tkart_codec_name(t->codec));
		print_shape(t, "[", ", ", "]");
		printf(", \"source_dtype\": ");
		json_str(t->source_dtype);
		printf(", \"offset\": %llu, \"length\": %llu", (unsigned long long)t->section.offset,
		       (unsigned long long)t->section.length);
		if (t->kind == TKART_KEPT) {
			const uint8_t *b;
			uint64_t n;
			printf(", \"dtype\": ");
			json_str(t->dtype);
			rc = tkart_kept_bytes(&f.a, t, &b, &n);
			if (rc == TKART_OK && with_trits) {
				printf(", \"hex\": \"");
				hex(b, n);
				printf("\"");
			}
		} else {
			printf(", \"granularity\": ");
			json_str(t->granularity);
			if (t->exact)
				printf(", \"exact\": true");
			if (!t->has_scales)
				printf(", \"scale\": %.9g", (double)t->scale);
			if (t->kind == TKART_TERNARY)
				printf(", \"counts\": [%lld, %lld, %lld]", (long long)t->neg, (long long)t->zero, (long long)t->pos);
			if (with_trits && t->kind == TKART_TERNARY) {
				int8_t *tr = malloc(t->n ? (size_t)t->n : 1);
				int64_t k;
				rc = tr ? tkart_decode_trits(&f.a, t, 0, t->rows, tr, f.scratch, f.scratch_len) : TKART_E_ARG;
				if (rc == TKART_OK) {
					printf(", \"trits\": \"");
					for (k = 0; k < t->n; k++)
						putchar("-0+"[tr[k] + 1]);
					printf("\"");
				}
				free(tr);
			}
			if (with_trits && t->kind == TKART_INT8) {
				const int8_t *c;
				rc = tkart_int8_codes(&f.a, t, &c);
				if (rc == TKART_OK) {
					printf(", \"hex\": \"");
					hex((const uint8_t *)c, (uint64_t)t->n);
					printf("\"");
				}
			}
			if (rc == TKART_OK && with_trits && t->has_scales) {
				float *s = malloc(t->nscales ? (size_t)t->nscales * sizeof *s : 1);
				int64_t k;
				rc = s ? tkart_read_scales(&f.a, t, s, (size_t)t->nscales) : TKART_E_ARG;
				if (rc == TKART_OK) {
					printf(", \"scales\": [");
					for (k = 0; k < t->nscales; k++)
						printf("%s%.9g", k ? ", " : "", (double)s[k]);
					printf("]");
				}
				free(s);
			}
			if (t->has_scales)
				printf(", \"scales_offset\": %llu, \"scales_length\": %llu", (unsigned long long)t->scales.offset,
				       (unsigned long long)t->scales.length);
		}
		if (rc == TKART_OK && (t->kind != TKART_KEPT || !strcmp(t->dtype, "F64") || !strcmp(t->dtype, "F32") ||
		                       !strcmp(t->dtype, "F16") || !strcmp(t->dtype, "BF16") ||
		                       !strcmp(t->dtype, "F8_E4M3") || !strcmp(t->dtype, "F8_E5M2"))) {
			/* the BLAKE3 of the values as little-endian float32, every NaN 0x7FC00000 */
			float *v = malloc(t->n ? (size_t)t->n * sizeof *v : 1);
			uint8_t *b = malloc(t->n ? (size_t)t->n * 4 : 1), h[32];
			int64_t k;
			rc = v && b ? tkart_values(&f.a, t, 0, t->n, v, f.scratch, f.scratch_len) : TKART_E_ARG;
			if (rc == TKART_OK) {
				for (k = 0; k < t->n; k++) {
					uint32_t u;
					memcpy(&u, &v[k], 4);
					if (v[k] != v[k])
						u = 0x7FC00000u;
					b[4 * k] = (uint8_t)u;
					b[4 * k + 1] = (uint8_t)(u >> 8);
					b[4 * k + 2] = (uint8_t)(u >> 16);
					b[4 * k + 3] = (uint8_t)(u >> 24);
				}
				tkart_blake3(b, (size_t)(4 * t->n), h);
				printf(", \"values_blake3\": \"");
				hex(h, 32);
				printf("\"");
			}
			free(v);
			free(b);
		}
		if (rc != TKART_OK) {
			printf(", \"error\": ");
			json_str(tkart_errmsg(&f.a));
		}
		printf("}");
	}
	printf("]");
	if (f.a.ncompanions) {
		printf(", \"companions\": [");
		for (i = 0; i < f.a.ncompanions; i++) {
			const tkart_companion *c = &f.a.companions[i];
			const uint8_t *b;
			uint64_t n;
			printf("%s\n {\"name\": ", i ? "," : "");
			json_str(c->name);
			printf(", \"offset\": %llu, \"length\": %llu", (unsigned long long)c->section.offset,
			       (unsigned long long)c->section.length);
			if (tkart_companion_bytes(&f.a, c, &b, &n) == TKART_OK) {
				/* the BLAKE3 of the bytes returned, computed again */
				uint8_t h[32];
				tkart_blake3(b, (size_t)n, h);
				printf(", \"blake3\": \"");
				hex(h, 32);
				printf("\"");
			}
			printf("}");
		}
		printf("]");
	}
	printf("}");
	unload(&f);
	return 1;
}

static int list_file(const char *path)
{
	art f;
	size_t i;
	int ok;
	if (!load(&f, path)) {
		unload(&f);
		return 2;
	}
	if (f.rc != TKART_OK) {
		printf("%s: invalid [%s]: ", path, tkart_class(f.rc));
		put_safe(stdout, tkart_errmsg(&f.a));
		printf("\n");
		unload(&f);
		return 1;
	}
	printf("%s: ok: format 1.%u, %lu tensors, %lu companions, every section hash and payload checked\n", path,
	       f.a.minor, (unsigned long)f.a.ntensors, (unsigned long)f.a.ncompanions);
	for (i = 0; i < f.a.ntensors; i++) {
		const tkart_tensor *t = &f.a.tensors[i];
		printf("  ");
		put_safe(stdout, t->name);
		printf("  %s %s ", tkart_kind_name(t->kind), tkart_codec_name(t->codec));
		print_shape(t, "[", " ", "]");
		printf(" ");
		put_safe(stdout, t->kind == TKART_KEPT ? t->dtype : t->granularity);
		printf(" from ");
		put_safe(stdout, t->source_dtype);
		printf("  at %llu+%llu", (unsigned long long)t->section.offset, (unsigned long long)t->section.length);
		if (t->has_scales)
			printf(" scales at %llu+%llu", (unsigned long long)t->scales.offset, (unsigned long long)t->scales.length);
		printf("\n");
	}
	for (i = 0; i < f.a.ncompanions; i++) {
		printf("  ");
		put_safe(stdout, f.a.companions[i].name);
		printf("  companion at %llu+%llu\n", (unsigned long long)f.a.companions[i].section.offset,
		       (unsigned long long)f.a.companions[i].section.length);
	}
	ok = 0;
	unload(&f);
	return ok;
}

static int rows_or_matvec(int argc, char **argv, int matvec)
{
	art f;
	const tkart_tensor *t;
	long long row0, nrows, k;
	int rc = 2;
	if (argc != (matvec ? 7 : 6)) {
		fprintf(stderr, "usage: tkart-check %s FILE NAME ROW0 NROWS%s\n", argv[1], matvec ? " XFILE" : "");
		return 2;
	}
	row0 = atoll(argv[4]);
	nrows = atoll(argv[5]);
	if (!load(&f, argv[2]))
		goto out;
	if (f.rc != TKART_OK) {
		fprintf(stderr, "tkart-check: %s: invalid [%s]: ", argv[2], tkart_class(f.rc));
		put_safe(stderr, tkart_errmsg(&f.a));
		fprintf(stderr, "\n");
		rc = 1;
		goto out;
	}
	t = tkart_find(&f.a, argv[3]);
	if (!t) {
		fprintf(stderr, "tkart-check: %s: no tensor named %s\n", argv[2], argv[3]);
		goto out;
	}
	if (!matvec) {
		int8_t *tr = malloc(nrows > 0 && t->cols > 0 ? (size_t)(nrows * t->cols) : 1);
		if (!tr)
			goto out;
		if (tkart_decode_trits(&f.a, t, row0, nrows, tr, f.scratch, f.scratch_len) != TKART_OK) {
			fprintf(stderr, "tkart-check: %s\n", tkart_errmsg(&f.a));
			free(tr);
			goto out;
		}
		for (k = 0; k < nrows * t->cols; k++)
			putchar("-0+"[tr[k] + 1]);
		putchar('\n');
		free(tr);
	} else {
		uint8_t *x;
		uint64_t xn;
		int32_t *y;
		if (!read_file(argv[6], &x, &xn) || xn != (uint64_t)t->cols) {
			fprintf(stderr, "tkart-check: %s: want %lld int8 values\n", argv[6], (long long)t->cols);
			goto out;
		}
		y = malloc(nrows > 0 ? (size_t)nrows * sizeof *y : 1);
		if (!y || tkart_matvec(&f.a, t, row0, nrows, (const int8_t *)x, y, f.scratch, f.scratch_len) != TKART_OK) {
			fprintf(stderr, "tkart-check: %s\n", tkart_errmsg(&f.a));
			free(x);
			free(y);
			goto out;
		}
		for (k = 0; k < nrows; k++)
			printf("%ld\n", (long)y[k]);
		free(x);
		free(y);
	}
	rc = 0;
out:
	unload(&f);
	return rc;
}

/* --mulint8 CODEC ROWS COLS GROUP HEX TOKENS X: the packed product over
 * a bare payload, one run per token (X: comma-separated int8 values of all
 * tokens); prints the sums, one per line, token after token. */
static int mulint8(int argc, char **argv)
{
	int codec;
	uint64_t rows, cols, group, ntok, n, len, i, per;
	const char *hx, *xs;
	uint8_t *p;
	int8_t *x;
	int32_t *y;
	int rc = 0;
	if (argc != 9) {
		fprintf(stderr, "usage: tkart-check --mulint8 CODEC ROWS COLS GROUP HEX TOKENS X\n");
		return 2;
	}
	codec = !strcmp(argv[2], "bits2") ? TKART_BITS2 : !strcmp(argv[2], "base3") ? TKART_BASE3 : 0;
	rows = (uint64_t)atoll(argv[3]);
	cols = (uint64_t)atoll(argv[4]);
	group = (uint64_t)atoll(argv[5]);
	hx = argv[6];
	ntok = (uint64_t)atoll(argv[7]);
	xs = argv[8];
	if (group == 0)
		group = cols;
	n = rows * cols;
	len = strlen(hx) / 2;
	per = group ? cols / group : 0;
	p = malloc(len ? len : 1);
	x = malloc(ntok * cols > 0 ? ntok * cols : 1);
	y = malloc(ntok * rows * per > 0 ? ntok * rows * per * sizeof *y : 1);
	if (!p || !x || !y)
		return 2;
	for (i = 0; i < len; i++) {
		unsigned v;
		if (sscanf(hx + 2 * i, "%2x", &v) != 1)
			return 2;
		p[i] = (uint8_t)v;
	}
	for (i = 0; i < ntok * cols; i++) {
		x[i] = (int8_t)strtol(xs, (char **)&xs, 10);
		if (*xs == ',')
			xs++;
	}
	for (i = 0; i < ntok && rc == 0; i++)
		rc = tkart_matvec_packed_groups(codec, p, len, n, cols, group, 0, rows, x + i * cols, y + i * rows * per);
	if (rc)
		fprintf(stderr, "tkart-check: %s\n", tkart_class(rc));
	else
		for (i = 0; i < ntok * rows * per; i++)
			printf("%ld\n", (long)y[i]);
	free(p);
	free(x);
	free(y);
	return rc ? 1 : 0;
}

/* ---- mutate -------------------------------------------------------------------
 * A fuzz-style loop for the sanitizer builds: every truncation and single-
 * byte flips of a file, each in an allocation of its exact size. Flips
 * inside the manifest get the trailer hash recomputed, so that the JSON
 * parser sees them; the payload decoders also run on every opened file's
 * sections directly, without the hash that would stop them. */

static int run_one(const uint8_t *src, uint64_t n, int patch_hash, uint64_t m)
{
	uint8_t *b = malloc(n ? (size_t)n : 1);
	void *arena, *scratch = NULL;
	size_t alen, slen = 0, i;
	tkart a;
	int rc;
	if (!b)
		return -1;
	memcpy(b, src, (size_t)n);
	if (patch_hash)
		tkart_blake3(b + m, (size_t)(n - 64 - m), b + n - 64 + 16);
	alen = tkart_arena_size(b, n);
	arena = malloc(alen);
	if (!arena) {
		free(b);
		return -1;
	}
	rc = tkart_open(&a, b, n, arena, alen);
	if (rc == TKART_OK) {
		for (i = 0; i < a.ntensors; i++)
			if (tkart_scratch_size(&a.tensors[i]) > slen)
				slen = tkart_scratch_size(&a.tensors[i]);
		scratch = malloc(slen ? slen : 1);
		for (i = 0; i < a.ntensors; i++) {
			const tkart_tensor *t = &a.tensors[i];
			int8_t x[64];
			if (t->kind == TKART_TERNARY && t->codec != TKART_ENTROPY && t->n <= 1 << 20 && t->cols <= 64) {
				int8_t *tr = malloc(t->n ? (size_t)t->n : 1);
				int32_t *y = malloc(t->rows ? (size_t)t->rows * sizeof *y : 1);
				memset(x, 1, sizeof x);
				if (tr && y) {
					tkart_unpack_trits(t->codec, b + t->section.offset, t->section.length, (uint64_t)t->n, 0,
					                   (uint64_t)t->n, tr);
					tkart_matvec_packed(t->codec, b + t->section.offset, t->section.length, (uint64_t)t->n,
					                    (uint64_t)t->cols, 0, (uint64_t)t->rows, x, y);
				}
				free(tr);
				free(y);
			}
		}
		rc = tkart_check(&a, scratch, slen);
	}
	free(scratch);
	free(arena);
	free(b);
	return rc;
}

/* About budget runs per file: the truncations and flips are spread evenly
 * over the file (every byte when budget allows), those in the manifest
 * twice as densely. */
static int mutate(const char *path, uint64_t budget)
{
	uint8_t *d;
	uint64_t size, i, m = 0, count[16], stride, mstride;
	size_t need, len, step;
	int patchable, k, full;
	static const uint8_t masks[3] = {0x01, 0x80, 0xff};
	memset(count, 0, sizeof count);
	if (!read_file(path, &d, &size)) {
		fprintf(stderr, "tkart-check: %s: cannot read the file\n", path);
		return 2;
	}
	full = run_one(d, size, 0, 0);
	/* arenas from 0 bytes up: enough, or TKART_E_ARENA, nothing else */
	need = tkart_arena_size(d, size);
	step = need / 97 + 1;
	for (len = 0;; len += step) {
		tkart a;
		void *arena;
		int rc;
		if (len > need)
			len = need;
		arena = len ? malloc(len) : NULL; /* NULL and 0 included */
		rc = tkart_open(&a, d, size, arena, len);
		free(arena);
		if (rc != TKART_E_ARENA && (full == TKART_OK ? rc != TKART_OK : 0)) {
			fprintf(stderr, "%s: arena of %lu bytes: %s: %s\n", path, (unsigned long)len, tkart_class(rc), a.errmsg);
			return 1;
		}
		if (len == need)
			break;
	}
	{
		uint64_t mlen;
		if (size >= 128) {
			m = 0;
			for (k = 7; k >= 0; k--)
				m = m << 8 | d[size - 64 + (uint64_t)k];
		}
		patchable = size >= 128 && m >= 64 && m <= size - 64;
		mlen = patchable ? size - 64 - m : 0;
		stride = budget < 8 ? size + 1 : (4 * size + budget - 1) / budget;
		mstride = budget < 8 ? size + 1 : (4 * mlen + budget - 1) / budget;
		if (stride < 1) stride = 1;
		if (mstride < 1) mstride = 1;
	}
	for (i = 0; i < size; i += stride) {
		int rc = run_one(d, i, 0, 0);
		if (rc < 0)
			return 2;
		count[rc]++;
	}
	for (i = 0; i < size; i++) {
		int rc, in_manifest = patchable && i >= m && i < size - 64;
		if (i % (in_manifest ? mstride : stride) != 0)
			continue;
		k = (int)(i % 3);
		d[i] ^= masks[k];
		rc = run_one(d, size, in_manifest, m);
		d[i] ^= masks[k];
		if (rc < 0)
			return 2;
		count[rc]++;
	}
	printf("%s: whole file %s;", path, tkart_class(full));
	for (k = 0; k < 16; k++)
		if (count[k])
			printf(" %s %llu", tkart_class(k), (unsigned long long)count[k]);
	printf("\n");
	free(d);
	return 0;
}

/* ---- bench ------------------------------------------------------------------- */

static uint64_t rng_state = 0x9E3779B97F4A7C15u;

static uint64_t rng(void)
{
	/* xorshift64*: common practice for a quick, reproducible generator */
	rng_state ^= rng_state >> 12;
	rng_state ^= rng_state << 25;
	rng_state ^= rng_state >> 27;
	return rng_state * 2685821657736338717u;
}

static void encode(int codec, const int8_t *tr, uint64_t n, uint8_t *p)
{
	uint64_t i;
	static const int code[3] = {2, 0, 1};
	if (codec == TKART_BITS2) {
		memset(p, 0, (size_t)((n + 3) / 4));
		for (i = 0; i < n; i++)
			p[i / 4] |= (uint8_t)(code[tr[i] + 1] << (2 * (i % 4)));
	} else {
		static const int pow3[5] = {1, 3, 9, 27, 81};
		memset(p, 0, (size_t)((n + 4) / 5));
		for (i = 0; i < n; i++)
			p[i / 5] = (uint8_t)(p[i / 5] + code[tr[i] + 1] * pow3[i % 5]);
	}
}

static int bench(void)
{
	const uint64_t rows = 1024, cols = 1024, n = rows * cols;
	int8_t *tr = malloc((size_t)n), *out = malloc((size_t)n), *x = malloc((size_t)cols);
	uint8_t *p = malloc((size_t)(n / 4 + 1));
	int32_t *y = malloc((size_t)rows * sizeof *y);
	const char *names[2] = {"gaussian", "sparse60"};
	const double p0s[2] = {0.31, 0.6};
	int codec, d;
	uint64_t i;
	if (!tr || !out || !x || !p || !y)
		return 2;
	for (i = 0; i < cols; i++)
		x[i] = (int8_t)(rng() % 255 - 127);
	printf("# %llu trits (a %llu x %llu matrix); CPU time of this process (clock()), so per core\n",
	       (unsigned long long)n, (unsigned long long)rows, (unsigned long long)cols);
	for (d = 0; d < 2; d++) {
		/* p(0) = p0, +1 and -1 equally likely */
		for (i = 0; i < n; i++) {
			double u = (double)(rng() >> 11) / 9007199254740992.0;
			tr[i] = (int8_t)(u < p0s[d] ? 0 : u < p0s[d] + (1 - p0s[d]) / 2 ? 1 : -1);
		}
		for (codec = TKART_BITS2; codec <= TKART_BASE3; codec++) {
			uint64_t len = codec == TKART_BITS2 ? (n + 3) / 4 : (n + 4) / 5, iters = 0, mv = 0;
			clock_t t0;
			double secs, mvsecs;
			encode(codec, tr, n, p);
			t0 = clock();
			do {
				if (tkart_unpack_trits(codec, p, len, n, 0, n, out) != TKART_OK)
					return 1;
				iters++;
				secs = (double)(clock() - t0) / CLOCKS_PER_SEC;
			} while (secs < 1.0);
			if (memcmp(out, tr, (size_t)n) != 0) {
				fprintf(stderr, "bench: %s decode differs from the trits\n", tkart_codec_name(codec));
				return 1;
			}
			t0 = clock();
			do {
				if (tkart_matvec_packed(codec, p, len, n, cols, 0, rows, x, y) != TKART_OK)
					return 1;
				mv++;
				mvsecs = (double)(clock() - t0) / CLOCKS_PER_SEC;
			} while (mvsecs < 1.0);
			printf("%s/%s\tdecode %.3g trits/s\tmatvec %.3g trits/s\n", tkart_codec_name(codec), names[d],
			       (double)(n * iters) / secs, (double)(n * mv) / mvsecs);
		}
	}
	free(tr);
	free(out);
	free(x);
	free(p);
	free(y);
	return 0;
}

int main(int argc, char **argv)
{
	int i, rc = 0;
	if (argc >= 2 && !strcmp(argv[1], "--bench"))
		return bench();
	if (argc >= 2 && !strcmp(argv[1], "--blake3")) {
		uint8_t *d, h[32];
		uint64_t n;
		if (argc != 3 || !read_file(argv[2], &d, &n)) {
			fprintf(stderr, "usage: tkart-check --blake3 FILE\n");
			return 2;
		}
		tkart_blake3(d, (size_t)n, h);
		hex(h, 32);
		printf("\n");
		free(d);
		return 0;
	}
	if (argc >= 2 && !strcmp(argv[1], "--mutate")) {
		if (argc < 4) {
			fprintf(stderr, "usage: tkart-check --mutate BUDGET FILE...\n");
			return 2;
		}
		for (i = 3; i < argc; i++) {
			int r = mutate(argv[i], (uint64_t)atoll(argv[2]));
			if (r)
				return r;
		}
		return 0;
	}
	if (argc >= 2 && !strcmp(argv[1], "--mulint8"))
		return mulint8(argc, argv);
	if (argc >= 2 && !strcmp(argv[1], "--rows"))
		return rows_or_matvec(argc, argv, 0);
	if (argc >= 2 && !strcmp(argv[1], "--matvec"))
		return rows_or_matvec(argc, argv, 1);
	if (argc >= 2 && !strcmp(argv[1], "--json")) {
		int with_trits = argc >= 3 && !strcmp(argv[2], "--trits"), first = 1 + with_trits + 1;
		if (first >= argc) {
			fprintf(stderr, "usage: tkart-check --json [--trits] FILE...\n");
			return 2;
		}
		printf("[");
		for (i = first; i < argc; i++) {
			if (i > first)
				printf(",\n");
			if (!json_file(argv[i], with_trits))
				return 2;
		}
		printf("]\n");
		return 0;
	}
	if (argc < 2 || argv[1][0] == '-') {
		fprintf(stderr, "usage: tkart-check FILE...  (or --json [--trits] FILE..., --rows, --matvec, --blake3 FILE, --bench)\n");
		return 2;
	}
	for (i = 1; i < argc; i++) {
		int r = list_file(argv[i]);
		if (r > rc)
			rc = r;
	}
	return rc;
}
