/* A judge's list of checks and the strings they point to (judge_int.h): shared by the
 * objectives' judges (judge.c, judge_sync.c) and read through judge.h's accessors. */
#include <stdlib.h>
#include <string.h>

#include "judge_int.h"

char *judge_keep(judge_t *j, const char *s)
{
    char **ns = realloc(j->strings, (j->n_strings + 1) * sizeof(*ns));
    if (!ns)
        return NULL;
    j->strings = ns;
    char *c = strdup(s);
    if (c)
        j->strings[j->n_strings++] = c;
    return c;
}

judge_check_t *judge_add_check(judge_t *j)
{
    if (j->n == j->cap) {
        size_t cap = j->cap ? 2 * j->cap : 16;
        judge_check_t *nc = realloc(j->checks, cap * sizeof(*nc));
        if (!nc)
            return NULL;
        j->checks = nc;
        j->cap = cap;
    }
    memset(&j->checks[j->n], 0, sizeof(j->checks[0]));
    return &j->checks[j->n++];
}

void judge_free(judge_t *j)
{
    if (!j)
        return;
    for (size_t i = 0; i < j->n_strings; i++)
        free(j->strings[i]);
    free(j->strings);
    free(j->checks);
    free(j);
}

size_t judge_check_count(const judge_t *j)
{
    return j->n;
}

const judge_check_t *judge_check_at(const judge_t *j, size_t i)
{
    return i < j->n ? &j->checks[i] : NULL;
}

bool judge_failed(const judge_t *j)
{
    for (size_t i = 0; i < j->n; i++)
        if (j->checks[i].verdict == JUDGE_FAIL || j->checks[i].verdict == JUDGE_NO_DATA)
            return true;
    return false;
}
