/* nn/testhook.c — reads NJ_TEST_HOOKS (see testhook.h). */
#include "nn/testhook.h"
#include <stdlib.h>
#include <string.h>

int nj_test_hook(const char *name, long v[2])
{
    const char *s = getenv("NJ_TEST_HOOKS");
    size_t len = strlen(name);
    while (s && *s) {
        if (!strncmp(s, name, len) && s[len] == '=') {
            char *end;
            v[0] = strtol(s + len + 1, &end, 10);
            if (end == s + len + 1) return 0;
            if (*end != ':') return (*end == ',' || !*end) ? 1 : 0;
            const char *b = end + 1;
            v[1] = strtol(b, &end, 10);
            return end != b && (*end == ',' || !*end) ? 2 : 0;
        }
        s = strchr(s, ',');
        if (s) s++;
    }
    return 0;
}
