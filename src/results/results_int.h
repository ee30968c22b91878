/* The results model's layout, shared by the files of src/results/ only. */
#ifndef SQUALL_REPORT_RESULTS_INT_H
#define SQUALL_REPORT_RESULTS_INT_H

#include "squall/results.h"

struct results_cell {
    char *phase, *class_name, *outcome;
    uint64_t hash; /* of the three keys, to skip most string compares */
    results_counters_t counters;
    hist_t *hists[RESULTS_M__COUNT]; /* NULL until first use */
    const results_t *owner;          /* for the histogram configuration */
};

struct results {
    int64_t lowest, highest;
    int digits;
    results_meta_t meta; /* its strings are malloc'd and owned here */
    results_cell_t **cells;
    size_t ncells, cap;
    json_t *sections; /* object {name: object} */
    json_t *inputs;   /* array of input objects; empty unless merged */
};

/* Replaces an owned meta string with a copy of s (NULL allowed); SQ_ENOMEM on failure. */
int results_meta_str(const char **slot, const char *s);
/* True for the top-level keys results.json itself uses (not allowed as section names). */
bool results_reserved_name(const char *name);
/* RFC 3339 UTC with milliseconds ("2026-12-01T23:34:09.123Z") <-> Unix ms; parse returns false
 * on anything else. buf holds at least 32 bytes. */
void results_format_time(int64_t unix_ms, char *buf);
bool results_parse_time(const char *s, int64_t *unix_ms);
/* The "meta" object of results.json for r (inputs included when merged); NULL when out of
 * memory. The caller owns the reference. */
json_t *results_meta_json(const results_t *r);

/* ---- merge: the inputs' sections combined once every input was added -------------------- */

/* One input of a merge as its entry in meta.inputs keeps it. */
typedef struct {
    const char *name;
    int64_t start_ms; /* the wall clock at its second 0 (0 unknown) */
    json_t *sections; /* borrowed from the entry */
} results_input_t;

/* The inputs of merge r from its meta.inputs (*n of them; malloc'd, NULL when out of memory). */
results_input_t *results_inputs_of(const results_t *r, size_t *n);
/* The wall-clock start (ms) of phase `name` in input in, from its "phases" section; false when
 * the phase did not run there or the input has no such section. */
bool results_input_phase_ms(const results_input_t *in, const char *name, double *ms);
/* The earliest wall-clock start (ms) of phase name over n inputs; false when it ran in none. */
bool results_first_phase_ms(const results_input_t *in, size_t n, const char *name, double *ms);
/* The "storms" sections of n inputs combined per tick instant (results_storms.c); a new
 * reference, NULL when no input has one or out of memory (*rc says which). */
json_t *results_merge_storms(const results_input_t *in, size_t n, int *rc);
/* The "sync" sections of n inputs combined window by window (results_sync.c), window starts in
 * seconds from merge_start_ms; a new reference, NULL when no input has one or on error (*rc:
 * SQ_ENOMEM, SQ_EMISMATCH when inputs disagree on an action's period). */
json_t *results_merge_sync(const results_input_t *in, size_t n, int64_t merge_start_ms, int *rc);

#endif
