#pragma once
/* The C entry points of libporebench_dicom.so (core/dicom_module/module.cpp): DICOM and DICONDE
 * input through ITK's GDCM reader, opened on the first DICOM input by core/io_itk.cpp. GDCM builds
 * its data dictionaries when it is loaded (~45 ms of CPU at every start while it was linked into
 * the executables, issue 16). No exception crosses this line: the host's callbacks report a refusal
 * by their return value and keep their own reason, and pb_dicom_read returns a status. */
#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

#define PB_DICOM_ABI 1

enum {
  PB_DICOM_OK = 0,
  PB_DICOM_BAD_INPUT = 1,    /* the input cannot be read as asked (message: pb_dicom_error) */
  PB_DICOM_NO_GEOMETRY = 2,  /* a tag that states the voxel size is missing (message: pb_dicom_error) */
  PB_DICOM_HOST = 3,         /* a host callback refused (the host has the reason) */
  PB_DICOM_FAILED = 4        /* anything else (message: pb_dicom_error) */
};
enum { PB_DICOM_U8 = 0, PB_DICOM_U16 = 1, PB_DICOM_I16 = 2, PB_DICOM_F32 = 3 };

typedef struct pb_dicom_host {
  void* ctx;
  /* 0 when size[0] * size[1] * size[2] voxels of `bytes_per_voxel` may be allocated for `what`;
   * non-zero: refused. */
  int (*check_memory)(void* ctx, const uint64_t size[3], uint64_t bytes_per_voxel, const char* what);
  /* The output volume (x fastest): a buffer of dims[0] * dims[1] * dims[2] voxels of `type`, or
   * NULL: refused. */
  void* (*allocate)(void* ctx, int type, const int64_t dims[3], const double spacing_mm[3], const double origin_mm[3]);
} pb_dicom_host;

int pb_dicom_abi(void);
/* A DICOM series folder or one DICOM file into the host's volume. spacing_given: the caller sets
 * the voxel size, so missing geometry tags are not refused. */
int pb_dicom_read(const char* path, int spacing_given, const pb_dicom_host* host);
/* The message of this thread's last failing read. */
const char* pb_dicom_error(void);

#ifdef __cplusplus
}
#endif
