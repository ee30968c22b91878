/* `squall completion bash|zsh`: a shell completion script written from the command table and
 * each command's option table, so that it names exactly the commands and options the parser
 * accepts. Words after an option that takes a value, and positional words, complete as file
 * names; after `help` come command names, after `completion` the shells. */
#include <string.h>

#include "squall/cli.h"
#include "squall/err.h"

static const char *const shells[] = {"bash", "zsh", NULL};

/* " --a -b --c" for one command's options (with --help, as the parser accepts it). */
static void bash_opts(const cli_cmd_t *c, bool values_only, out_t *o)
{
    for (const cli_opt_t *op = c->opts; op && op->name; op++) {
        if (values_only && !op->value)
            continue;
        out_print(o, " --%s", op->name);
        if (op->short_name)
            out_print(o, " -%c", op->short_name);
    }
    if (!values_only)
        out_print(o, " --help -h");
}

static void bash_script(out_t *o)
{
    out_print(o,
              "# bash completion for squall %s, written by `squall completion bash`\n"
              "_squall()\n{\n"
              "    local cur=${COMP_WORDS[COMP_CWORD]} prev=${COMP_WORDS[COMP_CWORD-1]}\n"
              "    local words='' takes=''\n"
              "    if [ \"$COMP_CWORD\" -eq 1 ]; then\n"
              "        words='--help -h --version -V",
              SQUALL_VERSION);
    for (const cli_cmd_t *const *t = cli_table(); *t; t++)
        out_print(o, " %s", (*t)->name);
    out_print(o, "'\n"
                 "        COMPREPLY=($(compgen -W \"$words\" -- \"$cur\"))\n"
                 "        return 0\n"
                 "    fi\n"
                 "    case ${COMP_WORDS[1]} in\n");
    for (const cli_cmd_t *const *t = cli_table(); *t; t++) {
        out_print(o, "        %s) words='", (*t)->name);
        bash_opts(*t, false, o);
        out_print(o, "'; takes='");
        bash_opts(*t, true, o);
        out_print(o, "' ;;\n");
    }
    out_print(o, "    esac\n"
                 "    case \" $takes \" in\n"
                 "        *\" $prev \"*) COMPREPLY=($(compgen -f -- \"$cur\")); return 0 ;;\n"
                 "    esac\n"
                 "    if [[ $cur == -* ]]; then\n"
                 "        COMPREPLY=($(compgen -W \"$words\" -- \"$cur\"))\n"
                 "    elif [ \"${COMP_WORDS[1]}\" = help ]; then\n"
                 "        COMPREPLY=($(compgen -W '");
    for (const cli_cmd_t *const *t = cli_table(); *t; t++)
        out_print(o, "%s%s", t == cli_table() ? "" : " ", (*t)->name);
    out_print(o, "' -- \"$cur\"))\n"
                 "    elif [ \"${COMP_WORDS[1]}\" = completion ]; then\n"
                 "        COMPREPLY=($(compgen -W '");
    for (int i = 0; shells[i]; i++)
        out_print(o, "%s%s", i ? " " : "", shells[i]);
    out_print(o, "' -- \"$cur\"))\n"
                 "    else\n"
                 "        COMPREPLY=($(compgen -f -- \"$cur\"))\n"
                 "    fi\n"
                 "    return 0\n"
                 "}\n"
                 "complete -o filenames -F _squall squall\n");
}

/* Text for inside a zsh single-quoted _arguments/_describe spec: ' [ ] : \ escaped. */
static void zsh_text(const char *s, out_t *o)
{
    for (; *s; s++) {
        if (*s == '\'')
            out_print(o, "'\\''");
        else if (strchr("[]:\\", *s))
            out_print(o, "\\%c", *s);
        else
            out_print(o, "%c", *s);
    }
}

static void zsh_script(out_t *o)
{
    out_print(o,
              "#compdef squall\n"
              "# zsh completion for squall %s, written by `squall completion zsh`\n"
              "_squall() {\n"
              "  local -a commands\n"
              "  commands=(\n",
              SQUALL_VERSION);
    for (const cli_cmd_t *const *t = cli_table(); *t; t++) {
        out_print(o, "    '%s:", (*t)->name);
        zsh_text((*t)->summary, o);
        out_print(o, "'\n");
    }
    out_print(o, "  )\n"
                 "  if (( CURRENT == 2 )); then\n"
                 "    _describe command commands\n"
                 "    return\n"
                 "  fi\n"
                 "  shift words\n"
                 "  (( CURRENT-- ))\n"
                 "  case $words[1] in\n");
    for (const cli_cmd_t *const *t = cli_table(); *t; t++) {
        out_print(o, "    %s) _arguments", (*t)->name);
        for (const cli_opt_t *op = (*t)->opts; op && op->name; op++) {
            out_print(o, " \\\n        '*--%s[", op->name);
            zsh_text(op->help, o);
            out_print(o, "]%s%s%s'", op->value ? ":" : "", op->value ? op->value : "",
                      op->value ? ":_files" : "");
            if (op->short_name) {
                out_print(o, " \\\n        '*-%c[", op->short_name);
                zsh_text(op->help, o);
                out_print(o, "]%s%s%s'", op->value ? ":" : "", op->value ? op->value : "",
                          op->value ? ":_files" : "");
            }
        }
        if (strcmp((*t)->name, "help") == 0)
            out_print(o, " \\\n        '1:command:(");
        else if (strcmp((*t)->name, "completion") == 0)
            out_print(o, " \\\n        '1:shell:(");
        else
            out_print(o, " \\\n        '--help[show this help]' '*:file:_files' ;;\n");
        if (strcmp((*t)->name, "help") == 0)
            for (const cli_cmd_t *const *u = cli_table(); *u; u++)
                out_print(o, "%s%s", u == cli_table() ? "" : " ", (*u)->name);
        if (strcmp((*t)->name, "completion") == 0)
            for (int i = 0; shells[i]; i++)
                out_print(o, "%s%s", i ? " " : "", shells[i]);
        if (strcmp((*t)->name, "help") == 0 || strcmp((*t)->name, "completion") == 0)
            out_print(o, ")' ;;\n");
    }
    out_print(o, "  esac\n"
                 "}\n"
                 "_squall \"$@\"\n");
}

/* The one positional word: the shell (cli_take_fn). */
static int take_shell(const cli_cmd_t *cmd, int k, const char *v, out_t *o, void *ctx)
{
    (void)k;
    return cli_take_one(cmd, ctx, v, "shell", o);
}

static int completion_main(const cli_cmd_t *cmd, int argc, char **argv, out_t *o)
{
    const char *shell = NULL;
    int rc = cli_parse(cmd, argc, argv, o, take_shell, &shell);
    if (rc >= 0)
        return rc;
    if (!shell)
        return cli_usage_error(cmd, o, "which shell? (expected bash or zsh)");
    if (strcmp(shell, "bash") == 0)
        bash_script(o);
    else if (strcmp(shell, "zsh") == 0)
        zsh_script(o);
    else
        return cli_usage_error(cmd, o, "unknown shell '%s' (expected bash or zsh)", shell);
    return SQ_EXIT_OK;
}

const cli_cmd_t cli_cmd_completion = {
    .name = "completion",
    .summary = "print a shell completion script (bash or zsh)",
    .usage = "bash|zsh",
    .description = "Prints a completion script for the shell, written from squall's own command\n"
                   "and option tables. Packages install it (bash: share/bash-completion/\n"
                   "completions/squall); to try it in the current bash:\n"
                   "  source <(squall completion bash)",
    .opts = NULL,
    .main = completion_main,
};
