# zsh -f zsh_complete.zsh FPATH_DIR BIN_DIR LINE OUTFILE: drives an interactive zsh in a
# pseudo-terminal (zsh's own zpty module) with the completion function of FPATH_DIR (_squall)
# loaded by compinit and BIN_DIR first in PATH, types LINE and a TAB, then turns the edited
# line into `>OUTFILE print -r -- <the line>` and runs it, so OUTFILE holds what the line
# became. Bounded: a few sleeps of at most 2 s, and the caller's timeout.
zmodload zsh/zpty || exit 1
zpty -b z zsh -f -i
zpty -w z "PS1='> '; fpath=($1 \$fpath); autoload -U compinit; compinit -u -D"
zpty -w z "PATH=$2:\$PATH"
sleep 1
zpty -n -w z "$3"$'\t'
sleep 2
zpty -n -w z $'\x01'">$4 print -r -- "$'\x05\n'
sleep 1
zpty -w z "exit"
while zpty -r -t z line; do :; done
zpty -d z
