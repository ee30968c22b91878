/* The target's own access log (`squall serve --access-log FILE`): one line per finished request,
 * in the Common Log Format (Apache httpd documentation, "Log Files": `%h %l %u %t "%r" %>s %b`,
 * 1 s times) or as NDJSON with the field names `squall profile` reads by default (time as unix
 * seconds with a microsecond fraction, method, path, status, duration in seconds, client).
 * Like nginx, a request is logged when it ends, with the time it was received. Per connection
 * (one request at a time over HTTP/1.1) the raw request target and the answer's status are kept
 * in libmicrohttpd's socket context, since neither is handed to the completion callback. */
#include <arpa/inet.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "server_int.h"

struct srv_conn_log {
    unsigned status;
    char client[INET6_ADDRSTRLEN];
    char uri[2048]; /* truncated beyond; escaped when written */
};

void srv_access_conn(void *cls, struct MHD_Connection *conn, void **socket_context,
                     enum MHD_ConnectionNotificationCode code)
{
    (void)cls;
    if (code == MHD_CONNECTION_NOTIFY_CLOSED) {
        free(*socket_context);
        *socket_context = NULL;
        return;
    }
    srv_conn_log_t *c = calloc(1, sizeof(*c));
    *socket_context = c;
    const union MHD_ConnectionInfo *ci =
        MHD_get_connection_info(conn, MHD_CONNECTION_INFO_CLIENT_ADDRESS);
    if (!c || !ci || !ci->client_addr)
        return;
    const struct sockaddr *sa = ci->client_addr;
    if (sa->sa_family == AF_INET)
        inet_ntop(AF_INET, &((const struct sockaddr_in *)sa)->sin_addr, c->client,
                  sizeof c->client);
    else if (sa->sa_family == AF_INET6)
        inet_ntop(AF_INET6, &((const struct sockaddr_in6 *)sa)->sin6_addr, c->client,
                  sizeof c->client);
}

static srv_conn_log_t *conn_log(struct MHD_Connection *conn)
{
    const union MHD_ConnectionInfo *ci =
        MHD_get_connection_info(conn, MHD_CONNECTION_INFO_SOCKET_CONTEXT);
    return ci ? ci->socket_context : NULL;
}

void *srv_access_uri(void *cls, const char *uri, struct MHD_Connection *conn)
{
    (void)cls;
    srv_conn_log_t *c = conn_log(conn);
    if (c) {
        snprintf(c->uri, sizeof c->uri, "%s", uri);
        c->status = 0;
    }
    return NULL; /* the request's own context is made by srv_http_access */
}

void srv_access_status(struct MHD_Connection *conn, unsigned status)
{
    srv_conn_log_t *c = conn_log(conn);
    if (c)
        c->status = status;
}

/* The request target as a CLF or JSON string: '"', '\' and bytes outside 0x20..0x7e escaped
 * (\" \\ \xhh, Apache's escapes, which JSON also reads once \x becomes \u00). */
static void put_escaped(FILE *f, const char *s, bool json)
{
    for (; *s; s++) {
        unsigned char ch = (unsigned char)*s;
        if (ch == '"' || ch == '\\')
            fprintf(f, "\\%c", ch);
        else if (ch < 0x20 || ch > 0x7e)
            fprintf(f, json ? "\\u%04x" : "\\x%02x", ch);
        else
            fputc(ch, f);
    }
}

void srv_access_write(srv_server_t *sv, struct MHD_Connection *conn, const char *method,
                      int64_t wall_ns, int64_t dur_ns)
{
    srv_conn_log_t *c = conn_log(conn);
    FILE *f = sv->access_log;
    if (!f || !c)
        return;
    const char *who = c->client[0] ? c->client : "-";
    if (sv->opts.access_log_ndjson) {
        fprintf(f, "{\"time\":%lld.%06lld,\"method\":\"%s\",\"path\":\"",
                (long long)(wall_ns / 1000000000), (long long)(wall_ns % 1000000000 / 1000),
                method);
        put_escaped(f, c->uri, true);
        fprintf(f, "\",\"status\":%u,\"duration\":%.6f,\"client\":\"%s\"}\n", c->status,
                (double)dur_ns / 1e9, who);
    } else {
        time_t t = (time_t)(wall_ns / 1000000000);
        struct tm tm;
        char when[40];
        gmtime_r(&t, &tm);
        strftime(when, sizeof when, "%d/%b/%Y:%H:%M:%S +0000", &tm);
        fprintf(f, "%s - - [%s] \"%s ", who, when, method);
        put_escaped(f, c->uri, false);
        fprintf(f, " HTTP/1.1\" %u -\n", c->status);
    }
}
