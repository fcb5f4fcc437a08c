/* Atomic output files: a temporary file beside the target, fsync, then link or rename. */
#include "synth_write.h"

#include <errno.h>
#include <fcntl.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

tf_status tf_sw_file_check(const char *path, int overwrite, tf_error *err)
{
    struct stat st;
    if (!overwrite && lstat(path, &st) == 0)
        return tf_error_set(err, TF_ERR_CANTCREAT,
                            "%s: exists; not overwritten (use --force to replace it)", path);
    return TF_OK;
}

static void dir_of(const char *path, char *dir, size_t size)
{
    const char *slash = strrchr(path, '/');
    if (!slash)
        snprintf(dir, size, ".");
    else if (slash == path)
        snprintf(dir, size, "/");
    else
        snprintf(dir, size, "%.*s", (int)(slash - path), path);
}

tf_status tf_sw_file_open(tf_sw_file *f, const char *path, int overwrite, tf_error *err)
{
    f->fd = -1;
    f->tmp[0] = '\0';
    f->overwrite = overwrite;
    if (!path[0] || strlen(path) + 16 >= sizeof f->tmp)
        return tf_error_set(err, TF_ERR_USAGE, "output path '%s': empty or too long", path);
    tf_status s = tf_sw_file_check(path, overwrite, err);
    if (s != TF_OK)
        return s;
    snprintf(f->path, sizeof f->path, "%s", path);
    const char *slash = strrchr(path, '/');
    const char *base = slash ? slash + 1 : path;
    char dir[4096];
    dir_of(path, dir, sizeof dir);
    if (strlen(dir) + strlen(base) + 10 >= sizeof f->tmp)
        return tf_error_set(err, TF_ERR_USAGE, "output path '%s': too long", path);
    memcpy(f->tmp, dir, strlen(dir));
    size_t len = strlen(dir);
    f->tmp[len++] = '/';
    f->tmp[len++] = '.';
    memcpy(f->tmp + len, base, strlen(base));
    len += strlen(base);
    memcpy(f->tmp + len, ".XXXXXX", 8);
    f->fd = mkstemp(f->tmp);
    if (f->fd < 0) {
        int e = errno;
        f->tmp[0] = '\0';
        return tf_error_set(err, TF_ERR_CANTCREAT, "%s: cannot create a file in '%s': %s", path,
                            dir, strerror(e));
    }
    /* mkstemp makes the file 0600; give it the permissions a new file would get */
    mode_t mask = umask(0);
    umask(mask);
    if (fchmod(f->fd, 0666 & ~mask) != 0) {
        /* harmless: the file stays private to the user */
    }
    return TF_OK;
}

tf_status tf_sw_file_write(tf_sw_file *f, const void *buf, size_t len, tf_error *err)
{
    const char *p = buf;
    while (len > 0) {
        ssize_t w = write(f->fd, p, len);
        if (w < 0) {
            if (errno == EINTR)
                continue;
            return tf_error_set(err, TF_ERR_IO, "%s: write failed: %s", f->path, strerror(errno));
        }
        p += w;
        len -= (size_t)w;
    }
    return TF_OK;
}

tf_status tf_sw_file_commit(tf_sw_file *f, tf_error *err)
{
    tf_status st = TF_OK;
    if (f->fd < 0)
        return tf_error_set(err, TF_ERR_INTERNAL, "%s: commit of a file that is not open", f->path);
    if (fsync(f->fd) != 0)
        st = tf_error_set(err, TF_ERR_IO, "%s: fsync failed: %s", f->path, strerror(errno));
    if (close(f->fd) != 0 && st == TF_OK)
        st = tf_error_set(err, TF_ERR_IO, "%s: close failed: %s", f->path, strerror(errno));
    f->fd = -1;
    if (st == TF_OK) {
        if (f->overwrite) {
            if (rename(f->tmp, f->path) != 0)
                st = tf_error_set(err, TF_ERR_CANTCREAT, "%s: cannot move the output into place: %s",
                                  f->path, strerror(errno));
        } else if (link(f->tmp, f->path) != 0) {
            int e = errno;
            if (e == EEXIST)
                st = tf_error_set(err, TF_ERR_CANTCREAT,
                                  "%s: exists; not overwritten (use --force to replace it)",
                                  f->path);
            else if (e == EPERM || e == ENOTSUP || e == EXDEV) {
                /* file systems without hard links: check once more, then rename */
                st = tf_sw_file_check(f->path, 0, err);
                if (st == TF_OK && rename(f->tmp, f->path) != 0)
                    st = tf_error_set(err, TF_ERR_CANTCREAT,
                                      "%s: cannot move the output into place: %s", f->path,
                                      strerror(errno));
            } else {
                st = tf_error_set(err, TF_ERR_CANTCREAT, "%s: cannot create: %s", f->path,
                                  strerror(e));
            }
        }
    }
    unlink(f->tmp); /* after link (or a failure); after rename it is already gone */
    f->tmp[0] = '\0';
    return st;
}

void tf_sw_file_abort(tf_sw_file *f)
{
    if (f->fd >= 0)
        close(f->fd);
    f->fd = -1;
    if (f->tmp[0])
        unlink(f->tmp);
    f->tmp[0] = '\0';
}
