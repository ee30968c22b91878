/* Reference values from Python (numpy/scipy through /usr/bin/python3) for the unit tests:
 * runs tests/unit/SCRIPT with `input` on its standard input and returns what it printed (a
 * static buffer, valid until the next call). Fails the running cmocka test on any error. */
#ifndef SQUALL_TEST_PYREF_H
#define SQUALL_TEST_PYREF_H

char *pyref_run(const char *script, const char *input);

#endif
