/* An output stream whose full blocks go to the file with O_DIRECT, around the page cache
 * (src/outfile_direct.c; src/outfile.c uses it for every output file).
 *
 * Why: on a virtual machine the kernel's copy of written data into fresh page-cache pages is
 * costly (each new page can fault on the host: 1.6 s of system time for 600 MB written with
 * dd and fsync here, 0.08 s with oflag=direct), and every output is synced before it is
 * renamed anyway, so the data has to reach the disk in any case. The stream keeps a buffer
 * of its own, aligned, and writes it whole with pwrite at aligned offsets; the last partial
 * block is written through the page cache by pm_i_dio_end. Where the file system refuses
 * O_DIRECT (at fcntl, or EINVAL at the first write) the stream goes on through the page
 * cache: the bytes are the same either way. */
#ifndef PM_OUTFILE_DIRECT_H
#define PM_OUTFILE_DIRECT_H

#include <stdint.h>
#include <stdio.h>

typedef struct pm_i_dio pm_i_dio;

/* A stdio stream writing to fd (open for writing, at offset 0, empty) through a direct
 * buffer; *out is its state for pm_i_dio_end. NULL when no stream can be made this way
 * (O_DIRECT refused by fcntl, or no memory): the caller then opens an ordinary stream on fd,
 * which stays open. fclose(stream) closes fd. Test hook: PM_TEST_OUTPUT_DIRECT=off returns
 * NULL, =refuse fails the first direct write with EINVAL (what a file system without
 * O_DIRECT, or a device with blocks over 4 KiB, does). Never set outside tests. */
FILE *pm_i_dio_open(int fd, pm_i_dio **out);

/* After fflush(stream): writes what the buffer still holds (through the page cache) so that
 * the file is complete for fsync. 0, or the errno of the first failed write. */
int pm_i_dio_end(pm_i_dio *d);

/* Bytes of d's file written with O_DIRECT so far (tests). */
uint64_t pm_i_dio_direct_bytes(const pm_i_dio *d);

#endif
