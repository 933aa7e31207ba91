/* tkart.h: a C99 reader of ternkit artifacts (.tkart), format 1.0 to 1.4,
 * written from pack/FORMAT.md.
 *
 * The reader works over a buffer the caller provides (typically the whole
 * file, mapped) and never reads outside it. It allocates nothing: the
 * parsed manifest lives in an arena the caller sizes with
 * tkart_arena_size(). bits2 and base3 payloads need only libc; the entropy
 * codec needs libzstd and is compiled in with -DTKART_WITH_ZSTD (without
 * it, decoding an entropy payload fails with TKART_E_UNSUPPORTED).
 *
 * Every function that can fail returns TKART_OK (0) or an error code; the
 * failure classes of FORMAT.md ("What a reader must reject") have their
 * own codes, and tkart_errmsg() says which rule broke and at which byte.
 *
 * A passing check proves the bytes and the format rules, not the quality
 * of the model: post-training ternarization loses accuracy, so evaluate a
 * model on its task before deploying it.
 */
#ifndef TKART_H
#define TKART_H

#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

/* The highest minor version of format 1 this reader implements. */
#define TKART_MINOR 4
/* The largest manifest this reader accepts (FORMAT.md: a reader documents
 * its own limit). */
#define TKART_MANIFEST_LIMIT ((uint64_t)256 << 20)
/* A JSON number longer than this many bytes is rejected [manifest]. */
#define TKART_NUMBER_LIMIT 256

/* Results. The first eight are the failure classes of FORMAT.md. */
enum {
	TKART_OK = 0,
	TKART_E_NOT_ARTIFACT = 1,  /* not-artifact */
	TKART_E_VERSION = 2,       /* version */
	TKART_E_STRUCTURE = 3,     /* structure */
	TKART_E_MANIFEST_HASH = 4, /* manifest-hash */
	TKART_E_MANIFEST = 5,      /* manifest */
	TKART_E_SECTION_HASH = 6,  /* section-hash */
	TKART_E_PAYLOAD = 7,       /* payload */
	TKART_E_COUNTS = 8,        /* counts */
	TKART_E_UNSUPPORTED = 9,   /* entropy payload in a build without zstd */
	TKART_E_ARENA = 10,        /* the arena is too small for the manifest */
	TKART_E_ARG = 11,          /* a bad argument: wrong kind, rows out of range, short buffer */
	TKART_E_NOT_FOUND = 12     /* no tensor of that name */
};

enum { TKART_TERNARY = 1, TKART_INT8 = 2, TKART_KEPT = 3 };
enum { TKART_BITS2 = 1, TKART_BASE3 = 2, TKART_ENTROPY = 3, TKART_RAW = 4 };
enum { TKART_GRAN_NONE = 0, TKART_GRAN_TENSOR = 1, TKART_GRAN_ROW = 2, TKART_GRAN_GROUP = 3 };

typedef struct tkart_section {
	uint64_t offset, length;
	uint8_t blake3[32];
	uint64_t nchunks;      /* BLAKE3 of each 2^22-byte piece (format 1.0 to 1.3), 0 for short sections */
	const uint8_t *chunks; /* nchunks × 32 bytes, in the arena */
	uint64_t npiece_cvs;      /* chaining value of each 2^22-byte piece (format 1.4), 0 for short sections */
	const uint8_t *piece_cvs; /* npiece_cvs × 32 bytes, in the arena */
} tkart_section;

typedef struct tkart_tensor {
	const char *name;         /* NUL-terminated, in the arena */
	int kind;                 /* TKART_TERNARY, TKART_INT8, TKART_KEPT */
	int codec;                /* TKART_BITS2 ... TKART_RAW */
	const char *source_dtype; /* "" never for a valid file */
	const char *dtype;        /* kept: the stored dtype; "" otherwise */
	int ndim;
	const int64_t *shape;
	int64_t n;           /* element count */
	int64_t rows, cols;  /* shape[0] and the product of the rest (ndim >= 2) */
	int gran;            /* TKART_GRAN_* (TKART_GRAN_NONE for kept) */
	int64_t group;       /* elements per scale; 0 when n is 0 or kept */
	int64_t nscales;     /* scales: 1 at tensor granularity, n / group otherwise */
	const char *granularity; /* as written: "tensor", "row", "group:N", or "" */
	float scale;         /* ternary at tensor granularity */
	int exact;
	int has_scales;
	tkart_section section, scales;
	int64_t neg, zero, pos; /* ternary: trit counts from the manifest */
} tkart_tensor;

/* A file carried beside the weights (format 1.3), stored byte for byte. */
typedef struct tkart_companion {
	const char *name; /* a base name, in the arena */
	tkart_section section;
} tkart_companion;

typedef struct tkart {
	/* read-only after tkart_open */
	const uint8_t *buf;
	uint64_t size;
	unsigned minor;
	uint64_t manifest_offset, manifest_length;
	uint8_t manifest_hash[32];
	size_t ntensors;
	const tkart_tensor *tensors;
	size_t ncompanions;
	const tkart_companion *companions;
	/* the last error */
	int err;
	uint64_t err_offset; /* byte offset in the file the error concerns */
	char errmsg[256];
	/* internal */
	uint8_t *arena;
	size_t arena_len, arena_lo, arena_hi;
	uint32_t *index;
	size_t index_slots;
	uint8_t *verified; /* per section (tensors' two, then companions'): 1 once its hashes were checked */
	size_t nspan, nblake3; /* tensors recording source_span, source_blake3 */
} tkart;

/* An arena size that suffices for the artifact in buf (read from its
 * trailer; a small constant when the trailer is unreadable). */
size_t tkart_arena_size(const void *buf, uint64_t size);

/* tkart_open checks the preamble, the trailer, the manifest hash, the
 * manifest, the minor version and the layout, in FORMAT.md's order. */
int tkart_open(tkart *a, const void *buf, uint64_t size, void *arena, size_t arena_len);

/* tkart_check reads everything tkart_open does not: padding, every
 * section's hashes, every payload decoded (trits counted), every int8 code
 * and scale. scratch (at least tkart_scratch_size of every entropy tensor)
 * may be NULL when no tensor is entropy-coded. */
int tkart_check(tkart *a, void *scratch, size_t scratch_len);

const char *tkart_errmsg(const tkart *a);
/* The FORMAT.md class name of an error code ("payload", ...). */
const char *tkart_class(int code);
const char *tkart_kind_name(int kind);
const char *tkart_codec_name(int codec);

const tkart_tensor *tkart_find(const tkart *a, const char *name);

/* Checks a tensor's sections (padding excluded) against their BLAKE3 and
 * chunk hashes; remembered, so later calls are free. The decoders below
 * call it before they touch a section. */
int tkart_verify_tensor(tkart *a, const tkart_tensor *t);

/* Scratch bytes tkart_decode_trits and tkart_matvec need for t: the
 * base3 payload of an entropy tensor, 0 otherwise. */
size_t tkart_scratch_size(const tkart_tensor *t);

/* Trits (-1, 0, +1) of rows [row0, row0+nrows) into dst (nrows × cols). */
int tkart_decode_trits(tkart *a, const tkart_tensor *t, int64_t row0, int64_t nrows,
                       int8_t *dst, void *scratch, size_t scratch_len);

/* The tensor's scales: 1 for tensor granularity, else t->nscales; dst
 * holds cap floats. */
int tkart_read_scales(tkart *a, const tkart_tensor *t, float *dst, size_t cap);

/* A companion's bytes, in place in the buffer, after its hashes are
 * checked; NULL from find for a name the artifact does not carry. */
const tkart_companion *tkart_find_companion(const tkart *a, const char *name);
int tkart_companion_bytes(tkart *a, const tkart_companion *c, const uint8_t **bytes, uint64_t *len);

/* int8 codes (n bytes) and kept bytes, in place in the buffer. */
int tkart_int8_codes(tkart *a, const tkart_tensor *t, const int8_t **codes);
int tkart_kept_bytes(tkart *a, const tkart_tensor *t, const uint8_t **bytes, uint64_t *len);

/* y[r] = sum over c of trit[row0+r][c] * x[c], r < nrows, as exact integer
 * sums in int32 (two's complement wrap beyond its range). x holds cols
 * values. */
int tkart_matvec(tkart *a, const tkart_tensor *t, int64_t row0, int64_t nrows,
                 const int8_t *x, int32_t *y, void *scratch, size_t scratch_len);

/* Values as float32 of elements [first, first+count) in C order (FORMAT.md,
 * What a reader returns): ternary float32(scale_g × trit), int8
 * float32(s_row × code), kept float dtypes decoded (F64 rounded to nearest
 * even, the others exact). A kept tensor of another dtype: TKART_E_ARG. */
int tkart_values(tkart *a, const tkart_tensor *t, int64_t first, int64_t count, float *dst, void *scratch,
                 size_t scratch_len);

/* The same over a packed payload (bits2 or base3) of n trits in rows of
 * cols: no hashing, only the codes are checked. */
int tkart_unpack_trits(int codec, const uint8_t *p, uint64_t len, uint64_t n,
                       uint64_t first, uint64_t count, int8_t *dst);
int tkart_matvec_packed(int codec, const uint8_t *p, uint64_t len, uint64_t n, uint64_t cols,
                        uint64_t row0, uint64_t nrows, const int8_t *x, int32_t *y);
/* One sum per group of `group` consecutive columns of each row (group
 * divides cols): y[r·(cols/group) + j] = Σ_{c=j·group}^{j·group+group−1}
 * trit[row0+r][c]·x[c]. group = cols is tkart_matvec_packed. */
int tkart_matvec_packed_groups(int codec, const uint8_t *p, uint64_t len, uint64_t n, uint64_t cols,
                               uint64_t group, uint64_t row0, uint64_t nrows, const int8_t *x, int32_t *y);

/* The 32-byte BLAKE3 hash of len bytes. */
void tkart_blake3(const void *data, size_t len, uint8_t out[32]);

#ifdef __cplusplus
}
#endif
#endif
