/* data/frames.c — listing a sequence's frames and building file paths. */
#include "data/dataset.h"
#include <dirent.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

char *nj_path_join(const char *dir, const char *name)
{
    size_t a = strlen(dir), b = strlen(name);
    char *p = malloc(a + b + 2);
    if (!p) return NULL;
    memcpy(p, dir, a);
    size_t k = a;
    if (a && dir[a - 1] != '/') p[k++] = '/';
    memcpy(p + k, name, b + 1);
    return p;
}

char *nj_depth_path(const nj_sequence *s, int frame)
{
    const char *name = s->frames[frame], *dot = strrchr(name, '.');
    size_t stem = dot ? (size_t)(dot - name) : strlen(name);
    const char *ext = nj_depth_extension(s->depth_format);
    char *file = malloc(stem + strlen(ext) + 1);
    if (!file) return NULL;
    memcpy(file, name, stem);
    strcpy(file + stem, ext);
    char *p = nj_path_join(s->depth_dir, file);
    free(file);
    return p;
}

static int is_frame_name(const char *n)
{
    if (n[0] == '.') return 0;
    const char *dot = strrchr(n, '.');
    return dot && (!strcasecmp(dot, ".png") || !strcasecmp(dot, ".jpg") || !strcasecmp(dot, ".jpeg"));
}

static int by_name(const void *a, const void *b)
{
    return strcmp(*(char *const *)a, *(char *const *)b);
}

void nj_free_names(char **names, int n)
{
    for (int i = 0; names && i < n; i++) free(names[i]);
    free(names);
}

int nj_list_frames(const char *dir, char ***names)
{
    *names = NULL;
    DIR *d = opendir(dir);
    if (!d) return -1;
    int n = 0, cap = 0;
    char **list = NULL;
    for (struct dirent *e; (e = readdir(d));) {
        if (!is_frame_name(e->d_name)) continue;
        if (n == cap) {
            cap = cap ? 2 * cap : 256;
            char **m = realloc(list, (size_t)cap * sizeof(char *));
            if (!m) { nj_free_names(list, n); closedir(d); return -1; }
            list = m;
        }
        if (!(list[n] = strdup(e->d_name))) { nj_free_names(list, n); closedir(d); return -1; }
        n++;
    }
    closedir(d);
    if (n) qsort(list, (size_t)n, sizeof(char *), by_name);
    *names = list;
    return n;
}
