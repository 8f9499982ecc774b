/*
 * test_outfile.c - output files: written whole through a temporary file or
 * not at all, the old file untouched and no temporary file left after any
 * failure, for the module and for every library writer that uses it; and
 * the guard that keeps outputs off a store and its SQLite companions by
 * device and inode (hard links, symbolic links, other names of the folder).
 */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <dirent.h>
#include <math.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <unistd.h>

#include "common/outfile_int.h"
#include "plyledger/map.h"
#include "plyledger/render.h"
#include "plyledger/seq.h"
#include "testutil.h"

/* ---- helpers ---------------------------------------------------------- */

static void put(const char *path, const char *text)
{
    assert_int_equal(tu_write_file(path, text, strlen(text)), 0);
}

/* The file holds exactly `text`. */
static void assert_content(const char *path, const char *text)
{
    size_t len = 0;
    unsigned char *b = tu_read_file(path, &len);
    if (!b)
        fail_msg("%s cannot be read", path);
    if (len != strlen(text) || memcmp(b, text, len) != 0)
        fail_msg("%s holds %zu other bytes, '%s' expected", path, len, text);
    free(b);
}

/* The names in `dir` (without . and ..), sorted, joined by spaces. */
static char *listing(const char *dir)
{
    struct dirent **names;
    int n = scandir(dir, &names, NULL, alphasort);
    assert_true(n >= 0);
    size_t cap = 1;
    for (int i = 0; i < n; i++)
        cap += strlen(names[i]->d_name) + 1;
    char *s = calloc(1, cap);
    assert_non_null(s);
    for (int i = 0; i < n; i++) {
        const char *d = names[i]->d_name;
        if (strcmp(d, ".") && strcmp(d, "..")) {
            if (*s)
                strcat(s, " ");
            strcat(s, d);
        }
        free(names[i]);
    }
    free(names);
    return s;
}

static void assert_listing(const char *dir, const char *want)
{
    char *got = listing(dir);
    if (strcmp(got, want) != 0)
        fail_msg("%s holds '%s', '%s' expected", dir, got, want);
    free(got);
}

/* Writes beyond `bytes` fail (EFBIG) while the limit holds: a full disk
 * that the process can make for itself. SIGXFSZ is ignored so that the
 * write returns the error instead of ending the program. */
static struct rlimit limit_file_size(rlim_t bytes)
{
    struct rlimit old, lim;
    assert_int_equal(getrlimit(RLIMIT_FSIZE, &old), 0);
    lim = old;
    lim.rlim_cur = bytes;
    signal(SIGXFSZ, SIG_IGN);
    assert_int_equal(setrlimit(RLIMIT_FSIZE, &lim), 0);
    return old;
}

static void restore_file_size(const struct rlimit *old)
{
    assert_int_equal(setrlimit(RLIMIT_FSIZE, old), 0);
}

static pl_map *noise_map(uint32_t w, uint32_t h)
{
    pl_map *m;
    assert_int_equal(pl_map_new(&m, w, h, 1, NULL), PL_OK);
    uint32_t seed = 12345;
    for (size_t i = 0; i < (size_t)w * h; i++) {
        seed = seed * 1664525u + 1013904223u;
        m->data[i] = (float)(seed >> 8) / 16777216.0f;
    }
    snprintf(m->channels[0].quantity, sizeof m->channels[0].quantity, "amplitude");
    snprintf(m->channels[0].unit, sizeof m->channels[0].unit, "K");
    return m;
}

/* ---- writing ---------------------------------------------------------- */

/* Until the commit the old file is what a reader sees; the temporary file
 * is in the same folder (so that the rename is atomic) and goes with the
 * commit. */
static void test_outfile__commit_replaces_the_target_whole(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    char *path = tu_path(dir, "out.txt");
    put(path, "old");
    pl_err err = {0};
    pl_outfile *of;
    TU_OK(pl_outfile_open(&of, path, &err));
    assert_string_equal(pl_outfile_path(of), path);
    fputs("new content", pl_outfile_stream(of));
    fflush(pl_outfile_stream(of));
    assert_content(path, "old");
    char *tmp_dir = pl__path_dir(pl_outfile__temp_path(of));
    assert_string_equal(tmp_dir, dir);
    free(tmp_dir);
    assert_content(pl_outfile__temp_path(of), "new content");
    TU_OK(pl_outfile_commit(of, &err));
    assert_content(path, "new content");
    assert_listing(dir, "out.txt");
    free(path);
    tu_rmtree(dir);
}

static void test_outfile__abort_leaves_the_old_file_and_no_temporary(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    char *path = tu_path(dir, "out.txt");
    put(path, "old");
    pl_outfile *of;
    assert_int_equal(pl_outfile_open(&of, path, NULL), PL_OK);
    fputs("half of it", pl_outfile_stream(of));
    pl_outfile_abort(of);
    assert_content(path, "old");
    assert_listing(dir, "out.txt");
    /* finish() after a writer's failure aborts and keeps the writer's code */
    assert_int_equal(pl_outfile_open(&of, path, NULL), PL_OK);
    assert_int_equal(pl_outfile_finish(of, PL_EFORMAT, NULL), PL_EFORMAT);
    assert_content(path, "old");
    assert_listing(dir, "out.txt");
    pl_outfile_abort(NULL);
    assert_int_equal(pl_outfile_commit(NULL, NULL), PL_OK);
    free(path);
    tu_rmtree(dir);
}

/* A write that fails (the file size limit: as a full disk would) is found
 * at the commit even when the writer did not check, and nothing changes. */
static void test_outfile__failed_write_is_found_at_commit(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    char *path = tu_path(dir, "out.bin");
    put(path, "old");
    pl_err err = {0};
    pl_outfile *of;
    TU_OK(pl_outfile_open(&of, path, &err));
    struct rlimit old = limit_file_size(4096);
    static char block[65536];
    memset(block, 'x', sizeof block);
    (void)fwrite(block, 1, sizeof block, pl_outfile_stream(of));
    int rc = pl_outfile_commit(of, &err);
    restore_file_size(&old);
    assert_int_equal(rc, PL_EIO);
    tu_assert_msg_has(err.msg, path);
    assert_content(path, "old");
    assert_listing(dir, "out.bin");
    free(path);
    tu_rmtree(dir);
}

/* Every file writer of the library writes through an output file: a
 * failing write leaves the old file as it was and no temporary file. */
static void test_outfile__library_writers_leave_old_files_on_failure(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    pl_map *m = noise_map(256, 256); /* 256 KiB of float32, noise: PNG cannot shrink it */
    pl_image *img;
    assert_int_equal(pl_image_new(&img, 256, 256, NULL), PL_OK);
    uint32_t seed = 777;
    for (size_t i = 0; i < (size_t)256 * 256 * 3; i++) {
        seed = seed * 1664525u + 1013904223u;
        img->rgb[i] = (unsigned char)(seed >> 24);
    }
    const char *names[] = { "map.npy", "map.png", "render.png" };
    for (int k = 0; k < 3; k++) {
        char *path = tu_path(dir, names[k]);
        put(path, "old");
        pl_err err = {0};
        struct rlimit old = limit_file_size(16384);
        int rc = k == 0   ? pl_map_save_npy(m, path, &err)
                 : k == 1 ? pl_map_save_png(m, 0, path, &err)
                          : pl_image_save_png(img, path, &err);
        restore_file_size(&old);
        if (rc != PL_EIO)
            fail_msg("%s: %d, PL_EIO expected", names[k], rc);
        tu_assert_msg_has(err.msg, path);
        assert_content(path, "old");
        /* and without the limit the same call replaces it */
        TU_OK(k == 0   ? pl_map_save_npy(m, path, &err)
              : k == 1 ? pl_map_save_png(m, 0, path, &err)
                       : pl_image_save_png(img, path, &err));
        struct stat st;
        assert_int_equal(stat(path, &st), 0);
        assert_true(st.st_size > 16384);
        free(path);
    }
    assert_listing(dir, "map.npy map.png render.png");

    /* a sequence: its cube and manifest stay as they were */
    char *seq = tu_path(dir, "seq.json"), *cube = tu_path(dir, "seq.npy");
    put(seq, "old manifest");
    put(cube, "old cube");
    pl_seq_info info = PL_SEQ_INFO_INIT;
    info.width = 64;
    info.height = 64;
    info.frame_count = 8;
    info.frame_rate_hz = 10;
    info.flash_time_s = 0.15;
    pl_seq_writer *w;
    pl_err err = {0};
    TU_OK(pl_seq_writer_open(&w, seq, &info, &err));
    struct rlimit old = limit_file_size(16384 * 4);
    int rc = PL_OK;
    for (uint32_t f = 0; f < info.frame_count && rc == PL_OK; f++)
        rc = pl_seq_writer_frame(w, m->data, &err);
    if (rc)
        pl_seq_writer_discard(w);
    else
        rc = pl_seq_writer_close(w, &err);
    restore_file_size(&old);
    assert_int_equal(rc, PL_EIO);
    assert_content(seq, "old manifest");
    assert_content(cube, "old cube");
    assert_listing(dir, "map.npy map.png render.png seq.json seq.npy");
    /* where the writer puts the data, for a program that guards it first */
    char *data;
    TU_OK(pl_seq_data_path(&data, seq, PL_SEQ_NPY_UINT16, &err));
    assert_string_equal(data, cube);
    free(data);
    TU_OK(pl_seq_data_path(&data, seq, PL_SEQ_PNG16, &err));
    char *frames = tu_path(dir, "seq-frames");
    assert_string_equal(data, frames);
    free(frames);
    free(data);
    free(seq);
    free(cube);
    pl_image_free(img);
    pl_map_free(m);
    tu_rmtree(dir);
}

static void test_outfile__refuses_folders_and_missing_folders(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    pl_err err = {0};
    pl_outfile *of;
    assert_int_equal(pl_outfile_open(&of, dir, &err), PL_EINVAL);
    assert_null(of);
    tu_assert_msg_has(err.msg, "folder");
    char *slash = tu_path(dir, "sub/");
    assert_int_equal(pl_outfile_open(&of, slash, &err), PL_EINVAL);
    tu_assert_msg_has(err.msg, slash);
    char *nowhere = tu_path(dir, "no/such/x.npy");
    assert_int_equal(pl_outfile_open(&of, nowhere, &err), PL_EIO);
    tu_assert_msg_has(err.msg, nowhere);
    tu_assert_msg_has(err.msg, "No such file");
    assert_listing(dir, "");
    free(slash);
    free(nowhere);
    tu_rmtree(dir);
}

/* A device cannot be replaced: it is written as it is. */
static void test_outfile__writes_a_device_straight(void **state)
{
    (void)state;
    pl_err err = {0};
    pl_outfile *of;
    TU_OK(pl_outfile_open(&of, "/dev/null", &err));
    fputs("gone", pl_outfile_stream(of));
    TU_OK(pl_outfile_commit(of, &err));
    struct stat st;
    assert_int_equal(stat("/dev/null", &st), 0);
    assert_true(S_ISCHR(st.st_mode));
}

/* A link to a file is followed: the file is replaced, the link stays. The
 * replaced file keeps its permission bits. */
static void test_outfile__follows_links_and_keeps_permissions(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    char *real = tu_path(dir, "real.txt"), *link = tu_path(dir, "link.txt");
    put(real, "old");
    assert_int_equal(chmod(real, 0640), 0);
    assert_int_equal(symlink("real.txt", link), 0);
    pl_err err = {0};
    pl_outfile *of;
    TU_OK(pl_outfile_open(&of, link, &err));
    fputs("new", pl_outfile_stream(of));
    TU_OK(pl_outfile_commit(of, &err));
    struct stat st;
    assert_int_equal(lstat(link, &st), 0);
    assert_true(S_ISLNK(st.st_mode));
    assert_int_equal(stat(real, &st), 0);
    assert_int_equal(st.st_mode & 07777, 0640);
    assert_content(real, "new");
    assert_listing(dir, "link.txt real.txt");
    free(real);
    free(link);
    tu_rmtree(dir);
}

/* ---- the guard -------------------------------------------------------- */

static void assert_refused(const char *out, const char *store, const char *what)
{
    pl_err err = {0};
    int rc = pl_outfile_guard(out, store, &err);
    if (rc != PL_EINVAL)
        fail_msg("%s was not refused as a file of the store %s (%d)", out, store, rc);
    tu_assert_msg_has(err.msg, out);
    tu_assert_msg_has(err.msg, "the store");
    tu_assert_msg_has(err.msg, what);
}

static void assert_allowed(const char *out, const char *store)
{
    pl_err err = {0};
    int rc = pl_outfile_guard(out, store, &err);
    if (rc != PL_OK)
        fail_msg("%s was refused against the store %s: %s", out, store, err.msg);
}

/* The store itself, by its name, a hard link, a symbolic link and another
 * name of its folder. */
static void test_outfile__guard_refuses_the_store_by_any_name(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    char *store = tu_path(dir, "fleet.plyledger");
    put(store, "SQLite format 3");
    assert_refused(store, store, "itself");
    char *hard = tu_path(dir, "copy.npy"), *soft = tu_path(dir, "soft.npy");
    assert_int_equal(link(store, hard), 0);
    assert_int_equal(symlink("fleet.plyledger", soft), 0);
    assert_refused(hard, store, "itself");
    assert_refused(soft, store, "itself");
    char *sub = tu_path(dir, "sub");
    assert_int_equal(mkdir(sub, 0777), 0);
    char *dotted = tu_path(dir, "sub/../fleet.plyledger");
    assert_refused(dotted, store, "itself");
    char *dirlink = tu_path(dir, "again");
    assert_int_equal(symlink(".", dirlink), 0);
    char *via = tu_path(dir, "again/fleet.plyledger");
    assert_refused(via, store, "itself");
    /* a store given by a relative name, an output by its absolute one */
    char *cwd = getcwd(NULL, 0);
    assert_int_equal(chdir(dir), 0);
    assert_refused(store, "fleet.plyledger", "itself");
    assert_refused("./sub/../copy.npy", store, "itself");
    assert_int_equal(chdir(cwd), 0);
    free(cwd);
    /* others are allowed: another file, the same name in another folder, no store */
    char *other = tu_path(dir, "other.npy"), *elsewhere = tu_path(sub, "fleet.plyledger");
    put(other, "x");
    assert_allowed(other, store);
    assert_allowed(elsewhere, store);
    put(elsewhere, "y");
    assert_allowed(elsewhere, store);
    assert_allowed(store, NULL);
    assert_allowed(store, "");
    /* the name of the store before it exists */
    char *future = tu_path(sub, "new.plyledger");
    assert_refused(future, future, "itself");
    free(future);
    free(other);
    free(elsewhere);
    free(via);
    free(dirlink);
    free(dotted);
    free(sub);
    free(hard);
    free(soft);
    free(store);
    tu_rmtree(dir);
}

/* The files SQLite keeps beside the store: by inode when they exist (also
 * through a link of another name), by folder and name when they do not. */
static void test_outfile__guard_refuses_the_sqlite_companions(void **state)
{
    (void)state;
    char *dir = tu_tmpdir();
    char *store = tu_path(dir, "fleet.plyledger");
    put(store, "SQLite format 3");
    const char *suffixes[] = { "-wal", "-shm", "-journal" };
    char *dirlink = tu_path(dir, "again");
    assert_int_equal(symlink(".", dirlink), 0);
    for (int k = 0; k < 3; k++) {
        char name[64], *member, *via;
        snprintf(name, sizeof name, "fleet.plyledger%s", suffixes[k]);
        member = tu_path(dir, name);
        via = tu_path(dirlink, name);
        /* not there yet */
        assert_refused(member, store, suffixes[k]);
        assert_refused(via, store, suffixes[k]);
        put(member, "log");
        assert_refused(member, store, suffixes[k]);
        assert_refused(via, store, suffixes[k]);
        char *hard = tu_path(dir, "innocent.png");
        assert_int_equal(link(member, hard), 0);
        assert_refused(hard, store, suffixes[k]);
        unlink(hard);
        free(hard);
        free(member);
        free(via);
    }
    /* near names are not companions */
    char *near = tu_path(dir, "fleet.plyledger-walrus"), *pre = tu_path(dir, "fleet.ply-wal");
    assert_allowed(near, store);
    assert_allowed(pre, store);
    free(near);
    free(pre);
    /* a store reached through a link: SQLite names the companions after
     * the file the link leads to */
    char *alias = tu_path(dir, "alias.db");
    assert_int_equal(symlink("fleet.plyledger", alias), 0);
    char *wal = tu_path(dir, "fleet.plyledger-wal");
    unlink(wal);
    assert_refused(wal, alias, "-wal");
    char *alias_wal = tu_path(dir, "alias.db-wal");
    assert_refused(alias_wal, alias, "-wal");
    free(alias_wal);
    free(wal);
    free(alias);
    free(dirlink);
    free(store);
    tu_rmtree(dir);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_outfile__commit_replaces_the_target_whole),
        cmocka_unit_test(test_outfile__abort_leaves_the_old_file_and_no_temporary),
        cmocka_unit_test(test_outfile__failed_write_is_found_at_commit),
        cmocka_unit_test(test_outfile__library_writers_leave_old_files_on_failure),
        cmocka_unit_test(test_outfile__refuses_folders_and_missing_folders),
        cmocka_unit_test(test_outfile__writes_a_device_straight),
        cmocka_unit_test(test_outfile__follows_links_and_keeps_permissions),
        cmocka_unit_test(test_outfile__guard_refuses_the_store_by_any_name),
        cmocka_unit_test(test_outfile__guard_refuses_the_sqlite_companions),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
