/* --set KEY=VALUE overrides: a dotted path into a plan file's YAML document, where list items
 * are addressed by their `name` (phases.steady.rate) or by 0-based index. load.c picks the file
 * (the last one holding the path's parent); missing mapping keys are created there. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "plan_int.h"
#include "squall/err.h"

/* A new plain scalar carrying override k's mark (see PC_SET_MARK), or 0. */
static int add_scalar(pctx_t *c, size_t k, const char *text)
{
    int id =
        yaml_document_add_scalar(c->doc, NULL, (yaml_char_t *)text, -1, YAML_PLAIN_SCALAR_STYLE);
    if (!id) {
        c->nomem = true;
        return 0;
    }
    yaml_document_get_node(c->doc, id)->start_mark.line = PC_SET_MARK - k;
    return id;
}

/* The item of a list named `comp` (by `name:` or by index), or NULL. */
static yaml_node_item_t *find_item(pctx_t *c, yaml_node_t *seq, const char *comp)
{
    size_t count = (size_t)(seq->data.sequence.items.top - seq->data.sequence.items.start);
    int64_t idx;
    if (value_parse_int(comp, 0, (int64_t)count - 1, &idx) == 0)
        return &seq->data.sequence.items.start[idx];
    for (size_t i = 0; i < count; i++) {
        yaml_node_t *it = pc_node(c, seq->data.sequence.items.start[i]);
        const char *name = pc_text(pc_get(c, it, "name"));
        if (name && strcmp(name, comp) == 0)
            return &seq->data.sequence.items.start[i];
    }
    return NULL;
}

/* The names (or, without names, the indexes) of a list's items: "fill, steady, rush". */
static void item_names(pctx_t *c, yaml_node_t *seq, char *buf, size_t cap)
{
    size_t count = (size_t)(seq->data.sequence.items.top - seq->data.sequence.items.start);
    size_t off = 0;
    buf[0] = '\0';
    for (size_t i = 0; i < count && off < cap; i++) {
        yaml_node_t *it = pc_node(c, seq->data.sequence.items.start[i]);
        const char *name =
            it && it->type == YAML_MAPPING_NODE ? pc_text(pc_get(c, it, "name")) : NULL;
        int w = name ? snprintf(buf + off, cap - off, "%s%s", i ? ", " : "", name)
                     : snprintf(buf + off, cap - off, "%s%zu", i ? ", " : "", i);
        off += w > 0 ? (size_t)w : 0;
    }
}

/* One step of the path from node `id`: returns the next node id, or 0 after an error. */
static int step(pctx_t *c, size_t k, int id, const char *comp, bool last, const char *value)
{
    plan_pos_t pos = {c->set_names[k], 0, 0};
    yaml_node_t *n = pc_node(c, id);
    if (n->type == YAML_SEQUENCE_NODE) {
        yaml_node_item_t *it = find_item(c, n, comp);
        if (!it) {
            char names[512];
            item_names(c, n, names, sizeof names);
            pc_error_at(c, pos,
                        "no list item '%s' (expected a name or index of an item in the top "
                        "plan file: %s)",
                        comp, names[0] ? names : "the list is empty");
            return 0;
        }
        if (last)
            *it = add_scalar(c, k, value);
        return *it;
    }
    if (n->type != YAML_MAPPING_NODE) {
        pc_error_at(c, pos,
                    "'%s' is inside a plain value (expected a path through mappings "
                    "and lists, got %s)",
                    comp, (const char *)n->data.scalar.value);
        return 0;
    }
    for (yaml_node_pair_t *pr = n->data.mapping.pairs.start; pr < n->data.mapping.pairs.top; pr++) {
        const char *key = pc_text(pc_node(c, pr->key));
        if (key && strcmp(key, comp) == 0) {
            if (last)
                pr->value = add_scalar(c, k, value);
            return pr->value;
        }
    }
    int kid = add_scalar(c, k, comp);
    int vid = last ? add_scalar(c, k, value)
                   : yaml_document_add_mapping(c->doc, NULL, YAML_BLOCK_MAPPING_STYLE);
    if (!kid || !vid || !yaml_document_append_mapping_pair(c->doc, id, kid, vid)) {
        c->nomem = true;
        return 0;
    }
    if (!last)
        yaml_document_get_node(c->doc, vid)->start_mark.line = PC_SET_MARK - k;
    return vid;
}

void plan_apply_override(pctx_t *c, size_t k, const plan_override_t *ov)
{
    char path[256];
    plan_pos_t pos = {c->set_names[k], 0, 0};
    yaml_node_t *root = yaml_document_get_root_node(c->doc);
    if (snprintf(path, sizeof path, "%s", ov->key) >= (int)sizeof path || !path[0] || !root ||
        root->type != YAML_MAPPING_NODE) {
        pc_error_at(c, pos,
                    "cannot apply (expected KEY=VALUE with a dotted KEY into a plan "
                    "mapping, got '%s')",
                    ov->key);
        return;
    }
    int id = 1; /* the root node of a loaded document */
    char *save = NULL;
    char *comp = strtok_r(path, ".", &save);
    while (comp && id) {
        char *next = strtok_r(NULL, ".", &save);
        id = step(c, k, id, comp, next == NULL, ov->value);
        comp = next;
    }
}

bool plan_override_fits(pctx_t *c, const plan_override_t *ov)
{
    char path[256];
    yaml_node_t *n = yaml_document_get_root_node(c->doc);
    if (!n || snprintf(path, sizeof path, "%s", ov->key) >= (int)sizeof path)
        return false;
    char *save = NULL, *comp = strtok_r(path, ".", &save);
    while (comp && n) {
        char *next = strtok_r(NULL, ".", &save);
        if (!next)
            return n->type == YAML_MAPPING_NODE ||
                   (n->type == YAML_SEQUENCE_NODE && find_item(c, n, comp));
        if (n->type == YAML_SEQUENCE_NODE) {
            yaml_node_item_t *it = find_item(c, n, comp);
            n = it ? pc_node(c, *it) : NULL;
        } else {
            n = pc_get(c, n, comp);
        }
        comp = next;
    }
    return false;
}

int plan_override_split(const char *kv, plan_override_t *ov, char **copy)
{
    const char *eq = strchr(kv, '=');
    if (!eq || eq == kv)
        return SQ_EINVAL;
    *copy = strdup(kv);
    if (!*copy)
        return SQ_ENOMEM;
    (*copy)[eq - kv] = '\0';
    ov->key = *copy;
    ov->value = *copy + (eq - kv) + 1;
    return 0;
}
