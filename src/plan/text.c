/* A plan file's bytes before libyaml sees them: its size and how deep its flow collections
 * nest are bounded (libyaml's time grows with the square of the nesting: 200,000 brackets kept
 * it busy for over a minute), and after a syntax error, where an unclosed bracket or quote
 * started. A plain byte scan: brackets inside quotes and comments do not count. */
#include <string.h>

#include "plan_int.h"

/* Line and column (1-based) of byte `at`. */
static plan_pos_t pos_of(const char *file, const char *s, size_t at)
{
    plan_pos_t p = {file, 1, 1};
    for (size_t i = 0; i < at; i++) {
        if (s[i] == '\n') {
            p.line++;
            p.col = 1;
        } else if (((unsigned char)s[i] & 0xC0) != 0x80) { /* columns count characters */
            p.col++;
        }
    }
    return p;
}

plan_pos_t plan_text_pos(const char *file, const char *s, size_t len, size_t at)
{
    return pos_of(file, s, at < len ? at : len);
}

void plan_text_scan(const char *s, size_t len, plan_text_scan_t *r)
{
    size_t open[PLAN_MAX_NESTING + 1];
    int depth = 0;
    char quote = 0;
    size_t quote_at = 0;
    memset(r, 0, sizeof(*r));
    for (size_t i = 0; i < len; i++) {
        char ch = s[i];
        if (quote) {
            if (ch == '\\' && quote == '"' && i + 1 < len)
                i++;
            else if (ch == quote && quote == '\'' && i + 1 < len && s[i + 1] == '\'')
                i++; /* '' inside single quotes */
            else if (ch == quote)
                quote = 0;
            continue;
        }
        if (ch == '#' && (i == 0 || s[i - 1] == ' ' || s[i - 1] == '\t' || s[i - 1] == '\n')) {
            while (i < len && s[i] != '\n')
                i++;
        } else if ((ch == '"' || ch == '\'') &&
                   (i == 0 || strchr(" \t\n[{,:", s[i - 1]) != NULL)) {
            quote = ch;
            quote_at = i;
        } else if (ch == '[' || ch == '{') {
            if (depth == PLAN_MAX_NESTING) {
                r->too_deep = true;
                r->at = i;
                return;
            }
            open[depth++] = i;
        } else if ((ch == ']' || ch == '}') && depth > 0) {
            depth--;
        }
    }
    if (quote) {
        r->unclosed = s[quote_at];
        r->at = quote_at;
    } else if (depth > 0) {
        r->unclosed = s[open[depth - 1]];
        r->at = open[depth - 1];
    }
}
