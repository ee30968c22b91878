/* Text tables for the terminal: every column as wide as its widest cell or header, so long
 * phase and class names (`reconnect-storm`, `list-gateways/all-pages`) never shift a row.
 *
 * A table collects rows, then prints them all at once through an out_t (results stream).
 * Columns are separated by two spaces; a column is left- or right-aligned; the last column is
 * never padded (no trailing blanks). A "note" is a free-text line under a row that starts at a
 * given column and does not widen it (e.g. "12 cancelled when the run stopped").
 * Numbers are formatted by the caller, without thousands separators (DEVELOPERS.md, "Output"). */
#ifndef SQUALL_TABLE_H
#define SQUALL_TABLE_H

#include <stddef.h>
#include <stdint.h>

#include "squall/out.h"

enum table_align { TABLE_LEFT, TABLE_RIGHT };

typedef struct {
    const char *header;
    enum table_align align;
} table_col_t;

typedef struct table table_t;

/* A table of n columns (cols is copied, its header strings must outlive the table; all NULL
 * for a table without a header line); NULL on allocation failure. */
table_t *table_new(const table_col_t *cols, size_t n);
void table_free(table_t *t);

/* Appends a row of the table's n cells (copied; NULL is printed as "-"). 0 or SQ_ENOMEM. */
int table_add(table_t *t, const char *const *cells);
/* Appends a note line printed under the last row, starting at column `col`. 0 or SQ_ENOMEM. */
int table_note(table_t *t, size_t col, const char *text);
/* The rows added so far (notes not counted). */
size_t table_rows(const table_t *t);
/* The width column `col` has so far (its widest cell or header). */
size_t table_width(const table_t *t, size_t col);
/* At least `width` characters for column `col`, e.g. to line up two tables. */
void table_min_width(table_t *t, size_t col, size_t width);

/* Every printed line starts with `indent` blanks (0 by default). */
void table_set_indent(table_t *t, size_t indent);

/* Prints the header (none when the first column's header is NULL) and every row and note to o's
 * results stream. */
void table_print(const table_t *t, out_t *o);

#endif
