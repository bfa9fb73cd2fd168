/* train/version.h — nightjar's version string. */
#ifndef NJ_VERSION_H
#define NJ_VERSION_H
#define NJ_VERSION "0.1.0"
#endif
