# Writes build_info.hpp with the version and the current git revision; run at every build, it
# rewrites the header only when the revision changed (so nothing recompiles needlessly).
execute_process(COMMAND git rev-parse --short=12 HEAD WORKING_DIRECTORY ${SRC}
                OUTPUT_VARIABLE PB_GIT_HASH OUTPUT_STRIP_TRAILING_WHITESPACE ERROR_QUIET)
execute_process(COMMAND git status --porcelain --untracked-files=no WORKING_DIRECTORY ${SRC}
                OUTPUT_VARIABLE PB_GIT_DIRTY OUTPUT_STRIP_TRAILING_WHITESPACE ERROR_QUIET)
if(NOT PB_GIT_HASH)
  set(PB_GIT_HASH "unknown")
elseif(PB_GIT_DIRTY)
  set(PB_GIT_HASH "${PB_GIT_HASH}-modified")
endif()
set(CMAKE_SOURCE_DIR ${SRC})
configure_file(${SRC}/core/build_info.hpp.in ${OUT} @ONLY)
