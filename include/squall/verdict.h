/* The three outcomes of a run, the words run, merge, the judge and the command line share:
 * PASS (the planned load was offered and every objective held), FAIL (an objective did not hold
 * or measured nothing) and INCONCLUSIVE (the evidence cannot support a pass). judge.h decides
 * them (judge_outcome); this header only names them, so a header that carries an outcome
 * need not include the judge. */
#ifndef SQUALL_VERDICT_H
#define SQUALL_VERDICT_H

enum judge_outcome { JUDGE_OUTCOME_PASS, JUDGE_OUTCOME_FAIL, JUDGE_OUTCOME_INCONCLUSIVE };

#endif
