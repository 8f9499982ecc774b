/*
 * outfile.c - output files through a temporary file and a rename, and the
 * guard that keeps outputs off the store.
 *
 * rename() within one folder is atomic (POSIX): a reader sees the old file
 * or the new one, never a part. The temporary file is fsync'ed before the
 * rename, and the folder after it, so that after a crash the name holds
 * either the old content or all of the new.
 */
#include "common/outfile_int.h"
#include "common/common_int.h"

#include <errno.h>
#include <fcntl.h>
#include <limits.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/types.h>
#include <unistd.h>

struct pl_outfile {
    char *path;     /* the target as given, for messages */
    char *final;    /* where the rename goes: the target, links followed */
    char *dir;      /* the folder of `final` ("" for the current one) */
    char *temp;     /* NULL when writing straight to a device or pipe */
    FILE *f;
};

char *pl__path_join(const char *dir, const char *name)
{
    if (name[0] == '/' || !dir || !dir[0])
        return pl__strdup(name);
    size_t n = strlen(dir) + strlen(name) + 2;
    char *p = malloc(n);
    if (p)
        snprintf(p, n, "%s/%s", dir, name);
    return p;
}

char *pl__path_dir(const char *path)
{
    const char *slash = strrchr(path, '/');
    if (!slash)
        return pl__strdup("");
    size_t n = slash == path ? 1 : (size_t)(slash - path);
    char *d = malloc(n + 1);
    if (d) {
        memcpy(d, path, n);
        d[n] = '\0';
    }
    return d;
}

/* The part after the last slash ("" for "dir/"), unlike pl__basename(),
 * which gives a whole path that ends in a slash. */
static const char *leaf_of(const char *path)
{
    const char *slash = strrchr(path, '/');
    return slash ? slash + 1 : path;
}

int pl__temp_create(char **out, const char *dir, const char *name, int folder)
{
    *out = NULL;
    /* keep the leaf within NAME_MAX whatever the target's name */
    int keep = (int)strnlen(name, 200);
    for (int k = 0; k < 1000; k++) {
        char leaf[256];
        snprintf(leaf, sizeof leaf, ".%.*s.%ld-%d.partial", keep, name, (long)getpid(), k);
        char *p = pl__path_join(dir, leaf);
        if (!p) {
            errno = ENOMEM;
            return -1;
        }
        int fd;
        if (folder)
            fd = mkdir(p, 0777);
        else
            fd = open(p, O_WRONLY | O_CREAT | O_EXCL | O_CLOEXEC, 0666);
        if (fd >= 0) {
            *out = p;
            return fd;
        }
        free(p);
        if (errno != EEXIST)
            return -1;
    }
    errno = EEXIST;
    return -1;
}

static void free_outfile(pl_outfile *of)
{
    free(of->path);
    free(of->final);
    free(of->dir);
    free(of->temp);
    free(of);
}

/* Where the rename goes: the path itself, or the regular file a symbolic
 * link at it leads to. *straight is set for a terminal or a pipe, which is
 * written as it is; a folder or any other kind of file is refused. */
static int resolve_target(pl_outfile *of, int *straight, pl_err *err)
{
    struct stat st, lst;
    *straight = 0;
    if (stat(of->path, &st) != 0) {
        /* nothing there yet (or a dangling link, which the rename replaces) */
        of->final = pl__strdup(of->path);
        return of->final ? PL_OK : pl__err(err, PL_ENOMEM, "%s: out of memory", of->path);
    }
    if (S_ISCHR(st.st_mode) || S_ISFIFO(st.st_mode)) {
        *straight = 1;
        return PL_OK;
    }
    if (!S_ISREG(st.st_mode))
        return pl__err(err, PL_EINVAL, "%s: is %s, not a regular file; give a file name",
                       of->path, S_ISDIR(st.st_mode) ? "a folder" : "a special file");
    if (lstat(of->path, &lst) == 0 && S_ISLNK(lst.st_mode))
        of->final = realpath(of->path, NULL);
    else
        of->final = pl__strdup(of->path);
    if (!of->final)
        return pl__err(err, PL_EIO, "%s: cannot follow the link: %s", of->path, strerror(errno));
    return PL_OK;
}

/* A terminal or a pipe: written as it is, since it cannot be replaced. */
static int open_straight(pl_outfile *of, pl_err *err)
{
    if (!(of->f = fopen(of->path, "wb")))
        return pl__err(err, PL_EIO, "%s: cannot open: %s", of->path, strerror(errno));
    return PL_OK;
}

PL_EXPORT int pl_outfile_open(pl_outfile **out, const char *path, pl_err *err)
{
    *out = NULL;
    if (!path || !*path)
        return pl__err(err, PL_EINVAL, "an output file needs a name");
    if (!*leaf_of(path))
        return pl__err(err, PL_EINVAL, "%s: names a folder; give a file name", path);
    pl_outfile *of = calloc(1, sizeof *of);
    if (!of || !(of->path = pl__strdup(path))) {
        free(of);
        return pl__err(err, PL_ENOMEM, "%s: out of memory", path);
    }
    int straight;
    int rc = resolve_target(of, &straight, err);
    if (rc == PL_OK && straight)
        rc = open_straight(of, err);
    if (rc == PL_OK && straight) {
        *out = of;
        return PL_OK;
    }
    if (rc == PL_OK && !(of->dir = pl__path_dir(of->final)))
        rc = pl__err(err, PL_ENOMEM, "%s: out of memory", path);
    if (rc) {
        free_outfile(of);
        return rc;
    }
    int fd = pl__temp_create(&of->temp, of->dir, leaf_of(of->final), 0);
    if (fd < 0) {
        int e = errno;
        rc = pl__err(err, e == ENOMEM ? PL_ENOMEM : PL_EIO, "%s: cannot create a file in %s: %s",
                     path, of->dir[0] ? of->dir : "the current folder", strerror(e));
        free_outfile(of);
        return rc;
    }
    /* a replaced file keeps its permission bits */
    struct stat st;
    if (stat(of->final, &st) == 0)
        (void)fchmod(fd, st.st_mode & 07777);
    if (!(of->f = fdopen(fd, "wb"))) {
        int e = errno;
        close(fd);
        unlink(of->temp);
        rc = pl__err(err, PL_EIO, "%s: cannot write: %s", path, strerror(e));
        free_outfile(of);
        return rc;
    }
    *out = of;
    return PL_OK;
}

PL_EXPORT FILE *pl_outfile_stream(pl_outfile *of)
{
    return of->f;
}

PL_EXPORT const char *pl_outfile_path(const pl_outfile *of)
{
    return of->path;
}

const char *pl_outfile__temp_path(const pl_outfile *of)
{
    return of->temp;
}

PL_EXPORT void pl_outfile_abort(pl_outfile *of)
{
    if (!of)
        return;
    if (of->f)
        fclose(of->f);
    if (of->temp)
        unlink(of->temp);
    free_outfile(of);
}

/* Make the rename itself durable. Some file systems cannot sync a folder;
 * the rename has happened either way, so this is best effort. */
static void sync_folder(const char *dir)
{
    int fd = open(dir[0] ? dir : ".", O_RDONLY | O_DIRECTORY | O_CLOEXEC);
    if (fd >= 0) {
        (void)fsync(fd);
        close(fd);
    }
}

PL_EXPORT int pl_outfile_commit(pl_outfile *of, pl_err *err)
{
    if (!of)
        return PL_OK;
    int bad = ferror(of->f) != 0;
    int e = bad ? EIO : 0;
    if (!bad && (fflush(of->f) != 0 || (of->temp && fsync(fileno(of->f)) != 0))) {
        bad = 1;
        e = errno;
    }
    if (fclose(of->f) != 0 && !bad) {
        bad = 1;
        e = errno;
    }
    of->f = NULL;
    int rc = PL_OK;
    if (bad)
        rc = pl__err(err, PL_EIO, "%s: cannot write: %s", of->path, strerror(e));
    else if (of->temp && rename(of->temp, of->final) != 0)
        rc = pl__err(err, PL_EIO, "%s: cannot put the file in place: %s", of->path,
                     strerror(errno));
    if (of->temp && rc)
        unlink(of->temp);
    else if (of->temp)
        sync_folder(of->dir);
    free_outfile(of);
    return rc;
}

int pl__outfile_put_line(pl_outfile *of, const char *text, pl_err *err)
{
    if (fputs(text, of->f) == EOF || fputc('\n', of->f) == EOF)
        return pl__err(err, PL_EIO, "%s: cannot write: %s", of->path, strerror(errno));
    return PL_OK;
}

PL_EXPORT int pl_outfile_finish(pl_outfile *of, int rc, pl_err *err)
{
    if (rc) {
        pl_outfile_abort(of);
        return rc;
    }
    return pl_outfile_commit(of, err);
}

/* ---- the guard ----------------------------------------------------------- */

/* The files SQLite keeps beside a database, and what to call them. */
static const struct {
    const char *suffix;
    const char *what;
} family[] = {
    { "", NULL },
    { "-wal", "-wal (write-ahead log)" },
    { "-shm", "-shm (shared-memory index)" },
    { "-journal", "-journal (rollback journal)" },
};

static int same_file(const struct stat *a, const struct stat *b)
{
    return a->st_dev == b->st_dev && a->st_ino == b->st_ino;
}

/* The folder of `path` by stat(), links followed. */
static int stat_folder(const char *path, struct stat *st)
{
    char *dir = pl__path_dir(path);
    int ok = dir && stat(dir[0] ? dir : ".", st) == 0;
    free(dir);
    return ok;
}

static int refuse(pl_err *err, const char *path, const char *store, size_t k)
{
    if (!family[k].what)
        return pl__err(err, PL_EINVAL, "%s: this is the store %s itself; write the output "
                       "elsewhere", path, store);
    return pl__err(err, PL_EINVAL, "%s: this is the store's %s file (of %s); write the "
                   "output elsewhere", path, family[k].what, store);
}

/* Is `path` one of the files of the store at `name` (a name of the store,
 * as given or resolved)? Returns the family index, or -1. */
static int family_member(const char *path, const struct stat *pst, int pexists,
                         const struct stat *pdir, int pdir_ok, const char *name)
{
    struct stat sdir;
    int same_dir = pdir_ok && stat_folder(name, &sdir) && same_file(pdir, &sdir);
    const char *leaf = leaf_of(path), *sleaf = leaf_of(name);
    size_t nleaf = strlen(sleaf), nname = strlen(name);
    for (size_t k = 0; k < sizeof family / sizeof family[0]; k++) {
        size_t ns = strlen(family[k].suffix);
        char *member = malloc(nname + ns + 1);
        if (!member)
            return -2;
        memcpy(member, name, nname);
        memcpy(member + nname, family[k].suffix, ns + 1);
        struct stat mst;
        int hit = pexists && stat(member, &mst) == 0 && same_file(pst, &mst);
        free(member);
        if (!hit && same_dir && strncmp(leaf, sleaf, nleaf) == 0 &&
            strcmp(leaf + nleaf, family[k].suffix) == 0)
            hit = 1;
        if (hit)
            return (int)k;
    }
    return -1;
}

PL_EXPORT int pl_outfile_guard(const char *path, const char *store, pl_err *err)
{
    if (!store || !*store || !path)
        return PL_OK;
    struct stat pst, pdir;
    int pexists = stat(path, &pst) == 0;
    int pdir_ok = stat_folder(path, &pdir);
    /* SQLite names the companions after the store's real path, links
     * resolved; the name as given is checked too */
    char *real = realpath(store, NULL);
    int k = family_member(path, &pst, pexists, &pdir, pdir_ok, store);
    if (k == -1 && real)
        k = family_member(path, &pst, pexists, &pdir, pdir_ok, real);
    free(real);
    if (k == -2)
        return pl__err(err, PL_ENOMEM, "%s: out of memory", path);
    if (k >= 0)
        return refuse(err, path, store, (size_t)k);
    return PL_OK;
}
