#pragma once
/* The C entry points of libporebench_torch.so (methods/torch_module/module.cpp), the LibTorch engine
 * of the neural family, opened on first use by methods/neural_torch.cpp. Plain C types only: no
 * LibTorch (nor porebench) type and no exception crosses this line. A failing call returns NULL or
 * non-zero and leaves its message in pb_torch_error(). */
#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

#define PB_TORCH_ABI 1

typedef struct pb_torch_model pb_torch_model;

/* PB_TORCH_ABI of the source the module was built from. */
int pb_torch_abi(void);
/* LibTorch's version, e.g. "1.13.1". */
const char* pb_torch_version(void);
/* The message of this thread's last failing call. */
const char* pb_torch_error(void);
/* A TorchScript file loaded for CPU inference (eval, optimised for inference) on `threads` threads
 * (0: LibTorch's default); NULL when LibTorch cannot load it (message: LibTorch's first line). */
pb_torch_model* pb_torch_load(const char* path, int threads);
/* forward() on one float32 tensor of `ndim` dims. 0: done, the output is held by the model until the
 * next run (pb_torch_output); 1: the model returned something else than one tensor (message: its
 * kind); 2: the model failed on this input (message: the interpreter's last line). */
int pb_torch_run(pb_torch_model* m, const float* input, const int64_t* shape, size_t ndim);
/* The last output: returns its number of dims and writes at most max_ndim of them to `shape`;
 * `data` points at its `count` float32 values, C order. */
size_t pb_torch_output(const pb_torch_model* m, int64_t* shape, size_t max_ndim, const float** data, size_t* count);
void pb_torch_free(pb_torch_model* m);

#ifdef __cplusplus
}
#endif
