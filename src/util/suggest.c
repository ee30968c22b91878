/* "Did you mean": the closest valid word by edit distance, shared by the command line (commands,
 * options) and the plan (keys, class names). */
#include "squall/suggest.h"

#include <stdio.h>
#include <string.h>

/* Levenshtein distance, bounded to short words (options, keys and names); 99 beyond. */
static int edit_distance(const char *a, const char *b)
{
    size_t la = strlen(a), lb = strlen(b);
    if (la > 63 || lb > 63)
        return 99;
    int row[64];
    for (size_t j = 0; j <= lb; j++)
        row[j] = (int)j;
    for (size_t i = 1; i <= la; i++) {
        int diag = row[0];
        row[0] = (int)i;
        for (size_t j = 1; j <= lb; j++) {
            int up = row[j];
            int best = diag + (a[i - 1] != b[j - 1]);
            if (up + 1 < best)
                best = up + 1;
            if (row[j - 1] + 1 < best)
                best = row[j - 1] + 1;
            row[j] = best;
            diag = up;
        }
    }
    return row[lb];
}

void suggest_init(suggest_t *s, const char *word)
{
    s->word = word;
    s->best = NULL;
    s->best_d = 1 << 30;
}

void suggest_offer(suggest_t *s, const char *prefix, const char *name)
{
    char whole[128];
    int n = snprintf(whole, sizeof whole, "%s%s", prefix ? prefix : "", name);
    if (n < 0 || (size_t)n >= sizeof whole)
        return;
    int d = edit_distance(s->word, whole);
    /* A prefix of a valid word (e.g. "--conn") is a plausible shorthand too. */
    size_t len = strlen(s->word);
    if (len >= 2 && strncmp(whole, s->word, len) == 0 && d > 1)
        d = 1;
    if (d < s->best_d) {
        s->best_d = d;
        s->best = name;
    }
}

const char *suggest_best(const suggest_t *s)
{
    int len = (int)strlen(s->word);
    int allowed = len <= 4 ? 2 : (len + 2) / 3;
    return s->best && s->best_d <= allowed ? s->best : NULL;
}

const char *suggest_closest(const char *word, const char *const *words)
{
    suggest_t s;
    suggest_init(&s, word);
    for (int i = 0; words[i]; i++)
        suggest_offer(&s, NULL, words[i]);
    return suggest_best(&s);
}
