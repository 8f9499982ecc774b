/*
 * outfile_int.h - what the library's writers share with the output-file
 * module beyond its public header (plyledger/outfile.h); never installed.
 */
#ifndef PLYLEDGER_OUTFILE_INT_H
#define PLYLEDGER_OUTFILE_INT_H

#include "plyledger/outfile.h"

/* dir + "/" + name, malloc'd; a name that is absolute, or a dir that is
 * NULL or empty, is used as is. NULL when out of memory. */
char *pl__path_join(const char *dir, const char *name);

/* The folder part of a path, malloc'd ("a/b.json" -> "a", "b.json" -> "",
 * "/b.json" -> "/"). NULL when out of memory. */
char *pl__path_dir(const char *path);

/*
 * A new file (folder == 0) or folder beside a finished one called `name`
 * in `dir` ("" for the current folder): ".NAME.PID-K.partial", so that
 * nobody mistakes it for a finished one, made ours by O_EXCL or mkdir().
 * *out receives its malloc'd path. Returns the open descriptor of a file,
 * 0 for a folder, or -1 with errno set (*out NULL).
 */
int pl__temp_create(char **out, const char *dir, const char *name, int folder);

/* Write `text` and a newline; PL_EIO naming the file when it fails. */
int pl__outfile_put_line(pl_outfile *of, const char *text, pl_err *err);

/* The temporary file's path, for tests; borrowed like the stream. */
const char *pl_outfile__temp_path(const pl_outfile *of);

#endif
