/* The text of squall's own error codes, generated from SQ_ERR_MAP. */
#include "squall/err.h"

const char *sq_strerror(int code)
{
    switch (code) {
    case SQ_OK:
        return "success";
#define SQ_ERR_TEXT(name, text)                                                                    \
    case SQ_E##name:                                                                               \
        return text;
        SQ_ERR_MAP(SQ_ERR_TEXT)
#undef SQ_ERR_TEXT
    default:
        return "unknown error";
    }
}
