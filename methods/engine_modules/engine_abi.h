#pragma once
/* The C entry points of the neural engines' modules, opened on first use by
 * methods/neural_engines.cpp: libporebench_torch.so (engine_modules/torch.cpp: LibTorch,
 * TorchScript) and libporebench_onnx.so (engine_modules/onnx.cpp: OpenCV dnn, ONNX). Linked into
 * the executables, LibTorch loaded ~285 shared libraries and OpenCV dnn protobuf at every start
 * (issue 16). Plain C types only: no engine (nor porebench) type and no exception crosses this
 * line. A failing call returns NULL or non-zero and leaves its message in pb_engine_error(). */
#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

#define PB_ENGINE_ABI 1

typedef struct pb_engine_model pb_engine_model;

/* PB_ENGINE_ABI of the source the module was built from. */
int pb_engine_abi(void);
/* The engine and its version, e.g. "libtorch 1.13.1", "opencv-dnn 4.6.0". */
const char* pb_engine_name(void);
/* The message of this thread's last failing call. */
const char* pb_engine_error(void);
/* A model file loaded for CPU inference on `threads` threads (0: the engine's default); NULL when
 * the engine cannot load it (message: what the engine said, naming the file). */
pb_engine_model* pb_engine_load(const char* path, int threads);
/* The model on one float32 tensor of `ndim` dims. 0: done, the output is held by the model until
 * the next run (pb_engine_output); 1: the output is not one float tensor (message: what it is,
 * after "returns "); 2: the model fails on this input (message: what follows the input's shape). */
int pb_engine_run(pb_engine_model* m, const float* input, const int64_t* shape, size_t ndim);
/* The last output: returns its number of dims and writes at most max_ndim of them to `shape`;
 * `data` points at its `count` float32 values, C order. */
size_t pb_engine_output(const pb_engine_model* m, int64_t* shape, size_t max_ndim, const float** data, size_t* count);
void pb_engine_free(pb_engine_model* m);

#ifdef __cplusplus
}
#endif
