/* data/jsondepth.c — nesting depth of JSON text at a position (jsondepth.h). */
#include "data/jsondepth.h"
#include <cjson/cJSON.h>

int nj_json_depth_at(const char *text, const char *at)
{
    int depth = 0, in_string = 0;
    for (const char *p = text; *p && p < at; p++) {
        if (in_string) {
            if (*p == '\\' && p[1]) p++;
            else if (*p == '"') in_string = 0;
        } else if (*p == '"') in_string = 1;
        else if (*p == '[' || *p == '{') depth++;
        else if ((*p == ']' || *p == '}') && depth > 0) depth--;
    }
    return depth;
}

int nj_json_too_deep(const char *text, const char *at)
{
    return at && nj_json_depth_at(text, at) >= CJSON_NESTING_LIMIT;
}
