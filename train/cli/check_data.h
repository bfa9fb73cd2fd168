/* train/cli/check_data.h — the `nightjar check-data` command. */
#ifndef NJ_CHECK_DATA_H
#define NJ_CHECK_DATA_H

/* argv[0] is "check-data"; returns the exit status (0 = usable data). */
int nj_check_data_main(int argc, char **argv);

#endif
