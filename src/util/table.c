/* Terminal tables whose columns fit their widest cell (see squall/table.h). */
#include "squall/table.h"

#include <stdlib.h>
#include <string.h>

#include "squall/err.h"

typedef struct {
    char **cells; /* n of them, or NULL for a note */
    size_t note_col;
    char *note;
} line_t;

struct table {
    table_col_t *cols;
    size_t *width;
    size_t n, indent;
    line_t *lines;
    size_t n_lines, cap;
};

/* Display width: UTF-8 continuation bytes take no column (class names may hold any text). */
static size_t text_width(const char *s)
{
    size_t w = 0;
    for (; *s; s++)
        w += ((unsigned char)*s & 0xC0) != 0x80;
    return w;
}

table_t *table_new(const table_col_t *cols, size_t n)
{
    table_t *t = calloc(1, sizeof(*t));
    if (!t)
        return NULL;
    t->cols = calloc(n, sizeof(*t->cols));
    t->width = calloc(n, sizeof(*t->width));
    if (!t->cols || !t->width) {
        table_free(t);
        return NULL;
    }
    t->n = n;
    for (size_t i = 0; i < n; i++) {
        t->cols[i] = cols[i];
        t->width[i] = cols[i].header ? text_width(cols[i].header) : 0;
    }
    return t;
}

void table_free(table_t *t)
{
    if (!t)
        return;
    for (size_t i = 0; i < t->n_lines; i++) {
        for (size_t c = 0; t->lines[i].cells && c < t->n; c++)
            free(t->lines[i].cells[c]);
        free(t->lines[i].cells);
        free(t->lines[i].note);
    }
    free(t->lines);
    free(t->cols);
    free(t->width);
    free(t);
}

static line_t *add_line(table_t *t)
{
    if (t->n_lines == t->cap) {
        size_t cap = t->cap ? 2 * t->cap : 16;
        line_t *l = realloc(t->lines, cap * sizeof(*l));
        if (!l)
            return NULL;
        t->lines = l;
        t->cap = cap;
    }
    line_t *l = &t->lines[t->n_lines];
    memset(l, 0, sizeof(*l));
    return l;
}

int table_add(table_t *t, const char *const *cells)
{
    line_t *l = add_line(t);
    char **copy = l ? calloc(t->n, sizeof(*copy)) : NULL;
    if (!copy)
        return SQ_ENOMEM;
    for (size_t c = 0; c < t->n; c++) {
        copy[c] = strdup(cells[c] ? cells[c] : "-");
        if (!copy[c]) {
            while (c--)
                free(copy[c]);
            free(copy);
            return SQ_ENOMEM;
        }
    }
    for (size_t c = 0; c < t->n; c++)
        if (text_width(copy[c]) > t->width[c])
            t->width[c] = text_width(copy[c]);
    l->cells = copy;
    t->n_lines++;
    return 0;
}

int table_note(table_t *t, size_t col, const char *text)
{
    line_t *l = add_line(t);
    char *copy = l ? strdup(text) : NULL;
    if (!copy)
        return SQ_ENOMEM;
    l->note = copy;
    l->note_col = col < t->n ? col : t->n - 1;
    t->n_lines++;
    return 0;
}

size_t table_rows(const table_t *t)
{
    size_t n = 0;
    for (size_t i = 0; i < t->n_lines; i++)
        n += t->lines[i].cells != NULL;
    return n;
}

size_t table_width(const table_t *t, size_t col)
{
    return col < t->n ? t->width[col] : 0;
}

void table_min_width(table_t *t, size_t col, size_t width)
{
    if (col < t->n && t->width[col] < width)
        t->width[col] = width;
}

void table_set_indent(table_t *t, size_t indent)
{
    t->indent = indent;
}

/* One cell padded to its column; the last column is not padded on the right. */
static void cell(const table_t *t, size_t c, const char *s, out_t *o)
{
    size_t pad = t->width[c] - text_width(s);
    bool last = c + 1 == t->n;
    if (c == 0)
        out_print(o, "%*s", (int)t->indent, "");
    if (t->cols[c].align == TABLE_RIGHT)
        out_print(o, "%*s%s", (int)pad, "", s);
    else
        out_print(o, "%s%*s", s, last ? 0 : (int)pad, "");
    out_print(o, "%s", last ? "\n" : "  ");
}

void table_print(const table_t *t, out_t *o)
{
    for (size_t c = 0; t->cols[0].header && c < t->n; c++)
        cell(t, c, t->cols[c].header ? t->cols[c].header : "", o);
    for (size_t i = 0; i < t->n_lines; i++) {
        const line_t *l = &t->lines[i];
        if (l->cells) {
            for (size_t c = 0; c < t->n; c++)
                cell(t, c, l->cells[c], o);
            continue;
        }
        size_t indent = t->indent;
        for (size_t c = 0; c < l->note_col; c++)
            indent += t->width[c] + 2;
        out_print(o, "%*s%s\n", (int)indent, "", l->note);
    }
}
