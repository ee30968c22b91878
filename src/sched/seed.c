/* Per-phase, per-stream seeds derived from the run's seed, so every random stream is
 * reproducible on its own. */
#include "squall/sched.h"

uint64_t sched_seed(uint64_t run_seed, uint32_t phase, uint32_t stream)
{
    /* splitmix64's finaliser (Steele, Lea, Flood, OOPSLA 2014) over the three inputs. */
    uint64_t z = run_seed + UINT64_C(0x9e3779b97f4a7c15) * (((uint64_t)phase << 32 | stream) + 1);
    z = (z ^ (z >> 30)) * UINT64_C(0xbf58476d1ce4e5b9);
    z = (z ^ (z >> 27)) * UINT64_C(0x94d049bb133111eb);
    return z ^ (z >> 31);
}
