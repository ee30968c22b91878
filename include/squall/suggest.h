/* "Did you mean": the valid word closest to a mistyped one, for error messages.
 *
 * Closeness is the Levenshtein edit distance (insertions, deletions and substitutions each
 * cost 1); a valid word that starts with the typed one counts as distance 1 at most, so a
 * shorthand such as "--conn" finds "--connections". A word is suggested only when it is close
 * enough to be a plausible typo: at most 2 edits for words of up to 4 characters, else at most a
 * third of the length, rounded up. Ties go to the word offered first. Distances are computed for
 * words of up to 63 characters only: a longer word or candidate matches only by the prefix rule. */
#ifndef SQUALL_SUGGEST_H
#define SQUALL_SUGGEST_H

/* The word in `words` (NULL-terminated) closest to `word`, or NULL when none is close enough. */
const char *suggest_closest(const char *word, const char *const *words);

/* The same one candidate at a time, for words that are not in an array of their own (an option
 * table, a list of structs). Each candidate is compared as `prefix` followed by `name` (prefix
 * may be NULL), e.g. "--" and an option's name; suggest_best returns the name without the
 * prefix. Names must outlive the suggest_t. */
typedef struct {
    const char *word;
    const char *best;
    int best_d;
} suggest_t;

void suggest_init(suggest_t *s, const char *word);
void suggest_offer(suggest_t *s, const char *prefix, const char *name);
const char *suggest_best(const suggest_t *s);

#endif
