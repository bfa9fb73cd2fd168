/* data/jsondepth.h — explaining a JSON parse failure caused by nesting.
 * cJSON stops at CJSON_NESTING_LIMIT (1000) levels and reports only where it
 * stopped; the readers of dataset and config files use this to say why. */
#ifndef NJ_JSONDEPTH_H
#define NJ_JSONDEPTH_H

/* Number of arrays/objects open at `at` (strings and escapes skipped). */
int nj_json_depth_at(const char *text, const char *at);
/* 1 when a parse that stopped at `at` stopped because of the nesting limit. */
int nj_json_too_deep(const char *text, const char *at);

#endif
