/*
 * plyledger/common.h - status codes, the error buffer and the version.
 *
 * Every plyledger function that can fail returns an int: PL_OK (0) on
 * success or one of the negative PL_E... codes below. The values are fixed
 * forever; new codes are only ever appended.
 *
 * Functions that can fail take an optional last argument `pl_err *err`.
 * When it is not NULL and the call fails, it receives the same code and one
 * impersonal line naming the input and the fault, for example
 * "map.png: not a grayscale PNG (colour type 2)". The library keeps no
 * global error state, never prints and never exits.
 */
#ifndef PLYLEDGER_COMMON_H
#define PLYLEDGER_COMMON_H

#include <stddef.h>
#include <stdint.h>

#if defined(PL_BUILDING_LIBRARY) && defined(__GNUC__)
#define PL_EXPORT __attribute__((visibility("default")))
#else
#define PL_EXPORT
#endif

#ifdef __cplusplus
extern "C" {
#endif

/** Status codes. Append only; never renumber. */
typedef enum pl_status {
    PL_OK = 0,          /**< success */
    PL_EINVAL = -1,     /**< an argument or input value is invalid */
    PL_ENOMEM = -2,     /**< out of memory */
    PL_EIO = -3,        /**< a file could not be read or written */
    PL_EFORMAT = -4,    /**< a file's content is not in the expected format */
    PL_ENOTFOUND = -5,  /**< a named record or file does not exist */
    PL_EEXISTS = -6,    /**< the record or file already exists */
    PL_EDB = -7,        /**< the SQLite layer reported an error */
    PL_ENOMATCH = -8,   /**< inputs do not agree with each other */
    PL_EVERSION = -9,   /**< the store was written by a newer plyledger */
    PL_ENOTSTORE = -10, /**< the file is not a plyledger store */
    PL_ERANGE = -11,    /**< a value lies outside its allowed range */
    PL_EREFUSED = -12,  /**< a quality limit refused the operation */
    PL_ECANCELED = -13, /**< the caller's progress callback asked to stop */
    PL_EREADONLY = -14, /**< the record is append-only */
    PL_EBUSY = -15,     /**< another process held the store longer than the wait allowed */
} pl_status;

/** Size of the message buffer in pl_err. */
#define PL_ERR_MSG_SIZE 512

/** Caller-owned error detail. Zero-initialise or leave it alone. */
typedef struct pl_err {
    int code;                   /**< the status the failing call returned */
    char msg[PL_ERR_MSG_SIZE];  /**< one line, NUL terminated */
} pl_err;

/**
 * Static English text for a status code ("invalid argument", ...).
 * The returned string lives for the life of the program.
 */
PL_EXPORT const char *pl_strerror(int code);

/**
 * The message of an error buffer, or pl_strerror(code) when the buffer is
 * empty. Never returns NULL; the string lives as long as `err`.
 */
PL_EXPORT const char *pl_err_message(const pl_err *err, int code);

/** The library's version string, e.g. "0.1.0". Static storage. */
PL_EXPORT const char *pl_version(void);

/**
 * Progress callback for long work: `fraction` runs from 0 to 1. Return 0 to
 * go on, non-zero to cancel (the work then returns PL_ECANCELED). Called
 * from the thread that started the work.
 */
typedef int (*pl_progress_fn)(void *userdata, double fraction);

#ifdef __cplusplus
}
#endif
#endif
