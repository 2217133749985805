# `cmake --install build --prefix P`: libporebench.so, the headers of the library layers under
# P/include/porebench (included as "core/volume.hpp", "metrics/score.hpp", ...), the generated
# build_info.hpp, and a CMake package (P/lib/cmake/porebench) so that a consumer writes
#   find_package(porebench REQUIRED)
#   target_link_libraries(app PRIVATE porebench::porebench)
# The package's target is written by hand (cmake/porebenchConfig.cmake.in): the library's own
# dependencies (ITK, OpenCV, ...) are linked into libporebench.so, and its headers need only
# nlohmann_json (found by the package) besides the standard library. The modules opened on first
# use (the LibTorch and OpenCV dnn engines, OpenCV's imgcodecs, the GDCM reader: core/modules.hpp) go to P/lib/porebench, where
# libporebench.so looks for them. tests/install/ builds a consumer against an install tree.
include(GNUInstallDirs)
include(CMakePackageConfigHelpers)
install(TARGETS porebench_shared LIBRARY DESTINATION ${CMAKE_INSTALL_LIBDIR})
install(TARGETS porebench_torch porebench_onnx porebench_imgcodecs porebench_dicom LIBRARY DESTINATION ${CMAKE_INSTALL_LIBDIR}/porebench)
foreach(layer core methods metrics synthetic suites report)
  install(DIRECTORY ${CMAKE_SOURCE_DIR}/${layer}/ DESTINATION ${CMAKE_INSTALL_INCLUDEDIR}/porebench/${layer}
          FILES_MATCHING PATTERN "*.hpp" PATTERN "*.inc" PATTERN "*_itk.hpp" EXCLUDE PATTERN "itk_bridge.hpp" EXCLUDE)
endforeach()
install(FILES ${PB_BUILD_INFO} DESTINATION ${CMAKE_INSTALL_INCLUDEDIR}/porebench)
configure_package_config_file(${CMAKE_SOURCE_DIR}/cmake/porebenchConfig.cmake.in
                              ${CMAKE_BINARY_DIR}/generated/porebenchConfig.cmake
                              INSTALL_DESTINATION ${CMAKE_INSTALL_LIBDIR}/cmake/porebench
                              PATH_VARS CMAKE_INSTALL_INCLUDEDIR CMAKE_INSTALL_LIBDIR)
write_basic_package_version_file(${CMAKE_BINARY_DIR}/generated/porebenchConfigVersion.cmake
                                 VERSION ${PROJECT_VERSION} COMPATIBILITY SameMinorVersion)
install(FILES ${CMAKE_BINARY_DIR}/generated/porebenchConfig.cmake ${CMAKE_BINARY_DIR}/generated/porebenchConfigVersion.cmake
        DESTINATION ${CMAKE_INSTALL_LIBDIR}/cmake/porebench)
