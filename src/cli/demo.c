/* `squall demo`: start the embedded target on a free loopback port, run the demo plan against
 * it, stop the target. Everything stays on this machine. */
#include <arpa/inet.h>
#include <fcntl.h>
#include <netinet/in.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/socket.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

#include "cli_run.h"
#include "squall/err.h"

/* A port that was free on 127.0.0.1 a moment ago (the kernel picks it). */
static int free_port(void)
{
    int fd = socket(AF_INET, SOCK_STREAM, 0);
    struct sockaddr_in a = {.sin_family = AF_INET, .sin_addr.s_addr = htonl(INADDR_LOOPBACK)};
    socklen_t len = sizeof a;
    int port = -1;
    if (fd >= 0 && bind(fd, (struct sockaddr *)&a, sizeof a) == 0 &&
        getsockname(fd, (struct sockaddr *)&a, &len) == 0)
        port = ntohs(a.sin_port);
    if (fd >= 0)
        close(fd);
    return port;
}

static bool port_open(int port)
{
    int fd = socket(AF_INET, SOCK_STREAM, 0);
    struct sockaddr_in a = {.sin_family = AF_INET,
                            .sin_port = htons((uint16_t)port),
                            .sin_addr.s_addr = htonl(INADDR_LOOPBACK)};
    bool ok = fd >= 0 && connect(fd, (struct sockaddr *)&a, sizeof a) == 0;
    if (fd >= 0)
        close(fd);
    return ok;
}

/* Starts `squall serve` (this same binary) and waits up to 5 s for it to listen. */
static pid_t spawn_server(int port, out_t *o)
{
    char listen[64];
    snprintf(listen, sizeof listen, "127.0.0.1:%d", port);
    pid_t pid = fork();
    if (pid == 0) {
        int null = open("/dev/null", O_RDWR);
        if (null >= 0) {
            dup2(null, STDOUT_FILENO);
            dup2(null, STDERR_FILENO);
        }
        execl("/proc/self/exe", "squall", "serve", "--listen", listen, (char *)NULL);
        _exit(127);
    }
    if (pid < 0) {
        out_error(o, "demo: cannot start the embedded target");
        return -1;
    }
    for (int i = 0; i < 100; i++) {
        if (port_open(port))
            return pid;
        nanosleep(&(struct timespec){.tv_nsec = 50000000}, NULL);
    }
    out_error(o, "demo: the embedded target did not listen on %s within 5 s", listen);
    kill(pid, SIGTERM);
    waitpid(pid, NULL, 0);
    return -1;
}

/* The demo plan: in the source tree of a binary built there (build/squall -> scenarios/), in
 * the data directory of an installed one (bin/squall -> share/squall/scenarios/, which also
 * holds for a staged install), in the data directory it was built for, or here. */
static const char *find_plan(char *buf, size_t cap)
{
    char dir[4096] = "";
    ssize_t n = readlink("/proc/self/exe", dir, sizeof dir - 1);
    char *slash = n > 0 ? (dir[n] = '\0', strrchr(dir, '/')) : NULL;
    if (slash)
        *slash = '\0';
    const char *const beside[] = {"/../scenarios", "/" SQUALL_BIN_TO_DATA "/scenarios"};
    for (size_t i = 0; slash && i < sizeof beside / sizeof beside[0]; i++) {
        snprintf(buf, cap, "%s%s/demo.yaml", dir, beside[i]);
        if (access(buf, R_OK) == 0)
            return buf;
    }
    const char *const fixed[] = {SQUALL_DATADIR "/scenarios/demo.yaml", "scenarios/demo.yaml"};
    for (size_t i = 0; i < sizeof fixed / sizeof fixed[0]; i++) {
        snprintf(buf, cap, "%s", fixed[i]);
        if (access(buf, R_OK) == 0)
            return buf;
    }
    return NULL;
}

/* The plan pointed at the target's port (after the user's own --set overrides). */
static int demo_run(const char *plan_path, const cli_run_args_t *ra, out_t *o)
{
    int port = free_port();
    if (port < 0)
        return out_error(o, "demo: no free loopback port"), SQ_EXIT_FAILURE;
    char url[64];
    snprintf(url, sizeof url, "http://127.0.0.1:%d", port);
    plan_override_t *sets = calloc(ra->n + 1, sizeof(*sets));
    if (!sets)
        return SQ_EXIT_FAILURE;
    memcpy(sets, ra->sets, ra->n * sizeof(*sets));
    sets[ra->n] = (plan_override_t){"target.url", url};
    plan_t *p;
    int err = plan_load(plan_path, sets, ra->n + 1, &p, o);
    free(sets);
    if (err)
        return err == SQ_ENOMEM ? SQ_EXIT_FAILURE : SQ_EXIT_USAGE;
    pid_t pid = spawn_server(port, o);
    int rc = SQ_EXIT_FAILURE;
    if (pid > 0) {
        out_info(o, "demo: the embedded target listens on %s (pid %d); running %s", url, (int)pid,
                 plan_path);
        rc = cli_run_plan(p, &ra->ro, ra->json, o);
        kill(pid, SIGTERM);
        waitpid(pid, NULL, 0);
    }
    plan_free(p);
    return rc;
}

static int demo_main(const cli_cmd_t *cmd, int argc, char **argv, out_t *o)
{
    cli_run_args_t ra;
    int rc = cli_run_args_init(&ra, cmd, argc, argv) ? SQ_EXIT_FAILURE : -1;
    if (rc < 0)
        rc = cli_parse(cmd, argc, argv, o, cli_run_take, &ra);
    if (rc < 0)
        rc = cli_run_args_check(cmd, &ra, o);
    if (rc < 0 && ra.procs)
        rc = cli_usage_error(cmd, o, "--procs is for `squall run PLAN`, not the demo");
    char buf[4200];
    const char *plan_path = ra.path;
    if (rc < 0 && !plan_path && !(plan_path = find_plan(buf, sizeof buf)))
        rc = cli_usage_error(cmd, o,
                             "cannot find scenarios/demo.yaml (looked beside the binary, in "
                             "%s/scenarios and here); name a plan",
                             SQUALL_DATADIR);
    if (rc < 0)
        rc = demo_run(plan_path, &ra, o);
    cli_run_args_close(&ra);
    return rc;
}

const cli_cmd_t cli_cmd_demo = {
    .name = "demo",
    .summary = "run the demo plan against the embedded target, all on loopback",
    .usage = "[PLAN.yaml] [-o DIR] [--set KEY=VALUE]... [--keep] [run options]",
    .description =
        "Starts `squall serve` on a free 127.0.0.1 port, points the plan (default\n"
        "scenarios/demo.yaml of the source tree the binary was built in, else the installed\n"
        "share/squall/scenarios/demo.yaml) at it with --set target.url, runs it like\n"
        "`squall run` (with the same options), and stops the target. Exit codes are those of\n"
        "`squall run`.",
    .opts = cli_run_opts,
    .main = demo_main,
};
