# `cmake --install BUILD --prefix P`: the library, its headers, the gridlu command and a
# CMake package, so that another project finds it with find_package(gridlu CONFIG).
include(GNUInstallDirs)
include(CMakePackageConfigHelpers)

set(GRIDLU_CMAKE_DIR ${CMAKE_INSTALL_LIBDIR}/cmake/gridlu)

# 0.x: any minor release may change the ABI.
set_target_properties(gridlu PROPERTIES VERSION ${PROJECT_VERSION}
                      SOVERSION ${PROJECT_VERSION_MAJOR}.${PROJECT_VERSION_MINOR})
# The installed command finds the library beside it wherever the prefix is moved; the
# linker's own directories stay out, those of libraries found elsewhere (a BLAS in /opt) in.
set_target_properties(gridlu_cli PROPERTIES INSTALL_RPATH "$ORIGIN/../${CMAKE_INSTALL_LIBDIR}")
set_target_properties(gridlu gridlu_cli PROPERTIES INSTALL_RPATH_USE_LINK_PATH TRUE)

target_include_directories(gridlu INTERFACE $<INSTALL_INTERFACE:${CMAKE_INSTALL_INCLUDEDIR}>)
# Destinations: GNUInstallDirs' lib (or lib64, ...) and bin.
install(TARGETS gridlu EXPORT gridluTargets)
install(TARGETS gridlu_cli)
install(DIRECTORY include/gridlu DESTINATION ${CMAKE_INSTALL_INCLUDEDIR}
        FILES_MATCHING PATTERN "*.hpp" PATTERN "*.h")
install(FILES ${CMAKE_CURRENT_BINARY_DIR}/include/gridlu/version.hpp
        DESTINATION ${CMAKE_INSTALL_INCLUDEDIR}/gridlu)
install(EXPORT gridluTargets NAMESPACE gridlu:: DESTINATION ${GRIDLU_CMAKE_DIR})

# The Fortran module library, a component of its own: its .mod file is only readable by
# the compiler (family and major version) that wrote it, recorded for the config file.
if(TARGET gridlu_fortran)
  get_target_property(GRIDLU_MODULE_DIR gridlu_fortran Fortran_MODULE_DIRECTORY)
  if(NOT GRIDLU_MODULE_DIR)
    set(GRIDLU_MODULE_DIR ${CMAKE_CURRENT_BINARY_DIR})  # CMake's default
  endif()
  set(GRIDLU_FORTRAN_MODULE_DESTINATION ${CMAKE_INSTALL_INCLUDEDIR}/gridlu/fortran)
  set_target_properties(gridlu_fortran PROPERTIES EXPORT_NAME fortran
                        VERSION ${PROJECT_VERSION}
                        SOVERSION ${PROJECT_VERSION_MAJOR}.${PROJECT_VERSION_MINOR}
                        INSTALL_RPATH "$ORIGIN" INSTALL_RPATH_USE_LINK_PATH TRUE)
  target_include_directories(gridlu_fortran
                             INTERFACE $<INSTALL_INTERFACE:${GRIDLU_FORTRAN_MODULE_DESTINATION}>)
  install(TARGETS gridlu_fortran EXPORT gridluFortranTargets)
  install(FILES ${GRIDLU_MODULE_DIR}/gridlu.mod DESTINATION ${GRIDLU_FORTRAN_MODULE_DESTINATION})
  install(EXPORT gridluFortranTargets NAMESPACE gridlu:: DESTINATION ${GRIDLU_CMAKE_DIR})
  string(REGEX MATCH "^[0-9]+" GRIDLU_FORTRAN_COMPILER_MAJOR "${CMAKE_Fortran_COMPILER_VERSION}")
endif()

configure_package_config_file(cmake/gridluConfig.cmake.in
                              ${CMAKE_CURRENT_BINARY_DIR}/gridluConfig.cmake
                              INSTALL_DESTINATION ${GRIDLU_CMAKE_DIR} NO_SET_AND_CHECK_MACRO)
# 0.x: a 0.1 consumer accepts 0.1.z only.
write_basic_package_version_file(${CMAKE_CURRENT_BINARY_DIR}/gridluConfigVersion.cmake
                                 COMPATIBILITY SameMinorVersion)
install(FILES ${CMAKE_CURRENT_BINARY_DIR}/gridluConfig.cmake
              ${CMAKE_CURRENT_BINARY_DIR}/gridluConfigVersion.cmake
        DESTINATION ${GRIDLU_CMAKE_DIR})
