# zsh -f zsh_complete.zsh FPATH_DIR BIN_DIR LINE OUTFILE: drives an interactive zsh in a
# pseudo-terminal (zsh's own zpty module) with the completion function of FPATH_DIR (_squall)
# loaded by compinit and BIN_DIR first in PATH, types LINE and a TAB, then turns the edited
# line into `>OUTFILE print -r -- <the line>` and runs it, so OUTFILE holds what the line
# became. Keys typed early wait in the terminal's input queue, and a TAB completes before zle
# reads the next key, so the sleeps only pace it; it then waits for OUTFILE (at most 20 s).
zmodload zsh/zpty || exit 1
zpty -b z zsh -f -i
zpty -w z "PS1='> '; fpath=($1 \$fpath); autoload -U compinit; compinit -u -D"
zpty -w z "PATH=$2:\$PATH"
sleep 1
zpty -n -w z "$3"$'\t'
sleep 2
zpty -n -w z $'\x01'">$4.part print -r -- "$'\x05'"; mv $4.part $4"$'\n'
for i in {1..200}; do
    [[ -s $4 ]] && break
    while zpty -r -t z line; do :; done # keep the terminal's output drained
    sleep 0.1
done
zpty -d z
