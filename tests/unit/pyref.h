/* Reference values from Python (numpy/scipy through /usr/bin/python3) for the unit tests:
 * runs tests/unit/SCRIPT with `input` on its standard input and returns what it printed (a
 * static buffer, valid until the next call). Fails the running cmocka test on any error. */
#ifndef SQUALL_TEST_PYREF_H
#define SQUALL_TEST_PYREF_H

char *pyref_run(const char *script, const char *input);
/* The same for any shell command (an outside tool such as util-linux column(1)). */
char *pyref_command(const char *command, const char *input);

#endif
