/* The design-file vocabulary: sections, keys, their kinds and dimensions (private). */
#ifndef TF_DESIGN_KEYS_H
#define TF_DESIGN_KEYS_H

#include <stddef.h>
#include <tankfit/design.h>

/* What a key's value is. */
typedef enum {
    TF_DK_QTY,      /* a double with a dimension, stored at offset */
    TF_DK_INT,      /* a plain integer in [imin, imax], stored as int at offset */
    TF_DK_SEED,     /* an unsigned 64-bit integer (the seed) */
    TF_DK_BOOL,     /* yes/no, stored as int at offset */
    TF_DK_TEXT,     /* free text of at most size - 1 bytes at offset */
    TF_DK_COLUMN,   /* a capture column name (non-empty text) */
    TF_DK_ENUM,     /* one of names[], handled by key name */
    TF_DK_TIMES,    /* [inverter] firing_times: a list of instants */
    TF_DK_POINT,    /* [schedule] point: time, R, L (the only repeatable key) */
    TF_DK_SCALE     /* [channels] scale.COLUMN (a pattern key) */
} tf_dkind;

/* Physical dimension of a quantity key: which units the value may carry. */
typedef enum {
    TF_DIM_RATIO,   /* plain number or percent */
    TF_DIM_F, TF_DIM_H, TF_DIM_OHM, TF_DIM_S, TF_DIM_HZ, TF_DIM_V, TF_DIM_A,
    TF_DIM_RATE,    /* samples per second: S/s or Hz */
    TF_DIM_GAIN,    /* probe factor: A/V or V/V */
    TF_DIM_LOGIC    /* gate channel values (0/1): plain number */
} tf_dim;

/* Allowed sign of a quantity. */
typedef enum { TF_RANGE_ANY, TF_RANGE_POS, TF_RANGE_NONNEG } tf_range;

typedef struct tf_dkey {
    const char *section, *key;
    tf_dkind kind;
    tf_dim dim;
    tf_range range;
    size_t offset;       /* into tf_design (QTY, INT, BOOL, TEXT, COLUMN) */
    size_t size;         /* TEXT/COLUMN buffer size */
    int imin, imax;      /* INT bounds */
    const char *const *names; /* ENUM: allowed names, NULL-terminated */
} tf_dkey;

/* The sections, in the order of the documentation. */
extern const char *const tf_design_sections[];

/* Look up a key of a section; NULL when unknown. [channels] scale.COLUMN keys
 * return the scale entry. */
const tf_dkey *tf_dkey_find(const char *section, const char *key);

/* All fixed keys (not scale.COLUMN), terminated by an entry with section NULL. */
extern const tf_dkey tf_dkeys[];

/* Index of k in tf_dkeys (for per-key bookkeeping), or -1 for pattern keys. */
int tf_dkey_index(const tf_dkey *k);
size_t tf_dkey_count(void);

/* Canonical unit of a dimension as stored ("F", "s", "" ...). */
const char *tf_dim_unit(tf_dim d);

/* "farads (F)", "a ratio (plain number or %)", ... for "expects ..." messages. */
const char *tf_dim_expects(tf_dim d);

/* Non-zero when a parsed canonical unit ("" included) fits the dimension. */
int tf_dim_accepts(tf_dim d, const char *unit);

/* The closest of candidates[0..n) to word by edit distance (Damerau-Levenshtein,
 * optimal string alignment), or NULL when none is close enough to suggest. */
const char *tf_suggest(const char *word, const char *const *candidates, size_t n);

/* Suggestion for an unknown key in a section: fills out with "did you mean 'x'?"
 * or "did you mean [other] x?" (empty when nothing is close). */
void tf_dkey_suggest(const char *section, const char *key, char *out, size_t size);

/* Suggestion for an unknown section (empty when nothing is close). */
void tf_dsection_suggest(const char *section, char *out, size_t size);

/* Non-zero when section is one of tf_design_sections. */
int tf_dsection_known(const char *section);

#endif
