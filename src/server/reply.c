/* Answers of the embedded target: queueing a response with a copied body or a JSON error, and
 * counting every answer by method and status. Below every file that answers requests. */
#include <stdio.h>

#include "server_int.h"

static const char allow[] = "GET, HEAD, PUT, POST, PATCH, DELETE";

void srv_reply_count(srv_server_t *sv, int method, unsigned status)
{
    if (method >= 0 && method < SRV_M_COUNT && status < 600)
        sv->requests[method][status]++;
}

static enum MHD_Result queue(srv_server_t *sv, struct MHD_Connection *conn, int method,
                             unsigned status, struct MHD_Response *r)
{
    if (!r)
        return MHD_NO;
    srv_reply_count(sv, method, status);
    srv_access_status(conn, status);
    enum MHD_Result rc = MHD_queue_response(conn, status, r);
    MHD_destroy_response(r);
    return rc;
}

enum MHD_Result srv_reply(srv_server_t *sv, struct MHD_Connection *conn, int method,
                          unsigned status, const char *ctype, const char *body, size_t len)
{
    struct MHD_Response *r =
        MHD_create_response_from_buffer(len, (void *)body, MHD_RESPMEM_MUST_COPY);
    if (r && ctype)
        MHD_add_response_header(r, "Content-Type", ctype);
    if (r && status == 405)
        MHD_add_response_header(r, "Allow", allow);
    return queue(sv, conn, method, status, r);
}

enum MHD_Result srv_reply_error_retry(srv_server_t *sv, struct MHD_Connection *conn, int method,
                                      unsigned status, const char *code, const char *msg,
                                      int retry_after)
{
    srv_buf_t b = {0};
    srv_buf_printf(&b, "{\"error\":\"%s\",\"message\":", code);
    srv_buf_json_str(&b, msg);
    srv_buf_str(&b, "}\n");
    struct MHD_Response *r =
        MHD_create_response_from_buffer(b.len, b.p ? b.p : "", MHD_RESPMEM_MUST_COPY);
    srv_buf_free(&b);
    if (r) {
        MHD_add_response_header(r, "Content-Type", "application/json");
        if (status == 405)
            MHD_add_response_header(r, "Allow", allow);
        if (retry_after >= 0) {
            char v[16];
            snprintf(v, sizeof(v), "%d", retry_after);
            MHD_add_response_header(r, "Retry-After", v);
        }
    }
    return queue(sv, conn, method, status, r);
}

enum MHD_Result srv_reply_error(srv_server_t *sv, struct MHD_Connection *conn, int method,
                                unsigned status, const char *code, const char *msg)
{
    return srv_reply_error_retry(sv, conn, method, status, code, msg, -1);
}
