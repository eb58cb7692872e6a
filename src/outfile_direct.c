/* Output streams written around the page cache (src/outfile_direct.h). */
#define _GNU_SOURCE /* O_DIRECT and fopencookie: Linux and glibc, named only under this */
#include "outfile_direct.h"

#include <errno.h>
#include <fcntl.h>
#include <stdlib.h>
#include <string.h>
#include <sys/types.h>
#include <unistd.h>

/* Offsets, lengths and the buffer's address are multiples of DIO_ALIGN: enough for every
 * logical block size up to 4 KiB (a device needing more refuses the first write with
 * EINVAL, and the stream goes on through the page cache). */
#define DIO_ALIGN 4096
#define DIO_BUF ((size_t)1 << 20)    /* one pwrite per MiB */
#define DIO_STDIO ((size_t)64 << 10) /* stdio's own buffer in front of it */

struct pm_i_dio {
    int fd;
    int direct; /* O_DIRECT still set on fd */
    int err;    /* errno of the first failed write, then every write fails with it */
    int refuse; /* tests (PM_TEST_OUTPUT_DIRECT=refuse): the first direct write gets EINVAL */
    char *buf;  /* DIO_BUF bytes, DIO_ALIGN-aligned */
    size_t fill;
    off_t off; /* file offset of buf[0] */
    uint64_t direct_bytes;
};

/* Clears O_DIRECT on the file: from here on every write goes through the page cache. */
static int go_buffered(pm_i_dio *d) {
    int fl = fcntl(d->fd, F_GETFL);
    if (fl < 0 || fcntl(d->fd, F_SETFL, fl & ~O_DIRECT) != 0) {
        d->err = errno ? errno : EIO;
        return -1;
    }
    d->direct = 0;
    return 0;
}

/* Writes p[0..n) at d->off, all of it; -1 with d->err set on failure. A direct write that
 * fails with EINVAL (the file system or the device does not take it) is made again through
 * the page cache, and so is the rest of a direct write that stopped off a block boundary. */
static int put(pm_i_dio *d, const char *p, size_t n) {
    while (n) {
        ssize_t w = -1;
        if (d->refuse && d->direct) {
            errno = EINVAL; /* as a device with larger blocks, or a file system without it */
            d->refuse = 0;
        } else {
            w = pwrite(d->fd, p, n, d->off);
        }
        if (w < 0 && errno == EINTR) {
            continue;
        }
        if (w < 0 && errno == EINVAL && d->direct) {
            if (go_buffered(d) != 0) {
                return -1;
            }
            continue;
        }
        if (w <= 0) {
            d->err = w < 0 ? errno : ENOSPC; /* a write of nothing: the disk is full */
            return -1;
        }
        if (d->direct) {
            d->direct_bytes += (uint64_t)w;
        }
        d->off += w;
        p += w;
        n -= (size_t)w;
        if (n && d->direct && (size_t)w % DIO_ALIGN != 0 && go_buffered(d) != 0) {
            return -1;
        }
    }
    return 0;
}

static ssize_t dio_write(void *cookie, const char *p, size_t n) {
    pm_i_dio *d = cookie;
    if (d->err) {
        errno = d->err;
        return -1;
    }
    size_t done = 0;
    while (done < n) {
        size_t k = n - done < DIO_BUF - d->fill ? n - done : DIO_BUF - d->fill;
        memcpy(d->buf + d->fill, p + done, k);
        d->fill += k;
        done += k;
        if (d->fill == DIO_BUF) {
            if (put(d, d->buf, DIO_BUF) != 0) {
                errno = d->err;
                return -1;
            }
            d->fill = 0;
        }
    }
    return (ssize_t)n;
}

static int dio_close(void *cookie) {
    pm_i_dio *d = cookie;
    int rc = close(d->fd);
    free(d->buf);
    free(d);
    return rc;
}

FILE *pm_i_dio_open(int fd, pm_i_dio **out) {
    *out = NULL;
    const char *env = getenv("PM_TEST_OUTPUT_DIRECT");
    if (env && strcmp(env, "off") == 0) {
        return NULL;
    }
    pm_i_dio *d = calloc(1, sizeof *d);
    void *buf = NULL;
    if (!d || posix_memalign(&buf, DIO_ALIGN, DIO_BUF) != 0) {
        free(d);
        return NULL;
    }
    int fl = fcntl(fd, F_GETFL);
    if (fl < 0 || fcntl(fd, F_SETFL, fl | O_DIRECT) != 0) {
        free(buf);
        free(d);
        return NULL;
    }
    d->fd = fd;
    d->direct = 1;
    d->buf = buf;
    d->refuse = env && strcmp(env, "refuse") == 0;
    cookie_io_functions_t io = {.read = NULL, .write = dio_write, .seek = NULL, .close = dio_close};
    FILE *fp = fopencookie(d, "w", io);
    if (!fp) {
        (void)fcntl(fd, F_SETFL, fl);
        free(buf);
        free(d);
        return NULL;
    }
    (void)setvbuf(fp, NULL, _IOFBF, DIO_STDIO);
    *out = d;
    return fp;
}

int pm_i_dio_end(pm_i_dio *d) {
    if (d->err) {
        return d->err;
    }
    if (d->fill) {
        /* the last partial block cannot go direct: the whole rest through the page cache */
        if ((d->direct && go_buffered(d) != 0) || put(d, d->buf, d->fill) != 0) {
            return d->err;
        }
        d->fill = 0;
    }
    return 0;
}

uint64_t pm_i_dio_direct_bytes(const pm_i_dio *d) {
    return d->direct_bytes;
}
