/*
 * plyledger/outfile.h - output files written whole or not at all, and
 * never onto the store.
 *
 * A pl_outfile is one file being written. pl_outfile_open() creates a new
 * temporary file in the target's folder (".NAME.PID-K.partial"), the
 * caller writes through pl_outfile_stream(), and pl_outfile_commit()
 * flushes it to disk (fsync), renames it onto the target and syncs the
 * folder. pl_outfile_abort() removes it instead. Until the rename the
 * target is untouched, so whatever fails (a full disk, a writer's error, a
 * killed process before the rename) the old file, or no file, stays, and
 * after a failure no temporary file is left behind. A caller that must
 * make sure a file can be written before it commits something else (a
 * store transaction) opens and writes it first and commits it after.
 *
 * The target, when it exists, is a regular file, replaced as above; a
 * symbolic link to one is followed (the file it names is replaced, the
 * link stays). The new file gets the old one's permission bits, or 0666
 * less the umask. A terminal, a pipe or another character device
 * (/dev/stdout, /dev/null) cannot be replaced and is written as it is. A
 * folder or any other kind of file is refused.
 *
 * The guard. pl_outfile_guard() refuses a target that is a store or one of
 * the files SQLite keeps beside it (NAME-wal, NAME-shm, NAME-journal):
 * the same file by device and inode, whatever name, hard link or symbolic
 * link leads to it, or, for a file that does not exist yet, the same name
 * in the same folder (the folder compared by device and inode). A program
 * that knows its store guards every output against it before it writes.
 *
 * The library's own file writers (maps, renderings, sequences, ground
 * truth) all write through a pl_outfile.
 */
#ifndef PLYLEDGER_OUTFILE_H
#define PLYLEDGER_OUTFILE_H

#include "plyledger/common.h"

#include <stdio.h>

#ifdef __cplusplus
extern "C" {
#endif

typedef struct pl_outfile pl_outfile;

/**
 * Start writing `path`: create the temporary file beside it.
 * @param[out] out  finish with pl_outfile_commit() or pl_outfile_abort();
 *                  NULL on failure
 * @return PL_OK, PL_EINVAL (the path names a folder, a block device or a
 *         socket), PL_EIO (the folder does not exist or a file cannot be
 *         created in it), PL_ENOMEM.
 */
PL_EXPORT int pl_outfile_open(pl_outfile **out, const char *path, pl_err *err);

/** The stream to write to, borrowed until commit or abort. */
PL_EXPORT FILE *pl_outfile_stream(pl_outfile *of);

/** The target as given to pl_outfile_open(), borrowed like the stream. */
PL_EXPORT const char *pl_outfile_path(const pl_outfile *of);

/**
 * Finish: flush and fsync the temporary file, rename it onto the target,
 * sync the folder, free `of` (also on failure, when the temporary file is
 * removed and the target left as it was). NULL is accepted (PL_OK).
 * @return PL_OK, PL_EIO (a write to the stream failed, or the flush, the
 *         fsync or the rename).
 */
PL_EXPORT int pl_outfile_commit(pl_outfile *of, pl_err *err);

/** Abandon: close and remove the temporary file, free `of`. NULL accepted. */
PL_EXPORT void pl_outfile_abort(pl_outfile *of);

/**
 * End a file after the writing's status `rc`: commit when it is PL_OK,
 * else abort (leaving `err` as the writer filled it). Lets a writer read
 * `return pl_outfile_finish(of, write_it(of, err), err);`.
 * @return pl_outfile_commit()'s status, or `rc`.
 */
PL_EXPORT int pl_outfile_finish(pl_outfile *of, int rc, pl_err *err);

/**
 * Refuse to write `path` when it is the store `store` or one of its SQLite
 * companion files (see the introduction). `store` NULL or empty: nothing
 * is protected.
 * @return PL_OK, PL_EINVAL (the message names the output and says which
 *         of the store's files it is), PL_ENOMEM.
 */
PL_EXPORT int pl_outfile_guard(const char *path, const char *store, pl_err *err);

#ifdef __cplusplus
}
#endif
#endif
