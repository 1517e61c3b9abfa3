# `cmake --install`: headers, libsprig.so (and libsprig.a with SPRIG_INSTALL_STATIC), the sprig
# program, a CMake package (find_package(sprig CONFIG) -> sprig::sprig) and pkg-config's sprig.pc.
include(CMakePackageConfigHelpers)

set(SPRIG_CMAKE_DIR ${CMAKE_INSTALL_LIBDIR}/cmake/sprig)
set(SPRIG_INSTALL_TARGETS sprig_shared)
if(SPRIG_INSTALL_STATIC)
  list(APPEND SPRIG_INSTALL_TARGETS sprig)
endif()

install(TARGETS ${SPRIG_INSTALL_TARGETS} EXPORT sprigTargets
  RUNTIME DESTINATION ${CMAKE_INSTALL_BINDIR}  # sprig.dll on Windows
  LIBRARY DESTINATION ${CMAKE_INSTALL_LIBDIR}
  ARCHIVE DESTINATION ${CMAKE_INSTALL_LIBDIR}
  INCLUDES DESTINATION ${CMAKE_INSTALL_INCLUDEDIR})
install(DIRECTORY ${PROJECT_SOURCE_DIR}/runtime/include/sprig
  DESTINATION ${CMAKE_INSTALL_INCLUDEDIR} FILES_MATCHING PATTERN "*.h")
install(TARGETS sprig_cli RUNTIME DESTINATION ${CMAKE_INSTALL_BINDIR})
install(EXPORT sprigTargets NAMESPACE sprig:: DESTINATION ${SPRIG_CMAKE_DIR})

configure_package_config_file(${PROJECT_SOURCE_DIR}/cmake/sprigConfig.cmake.in
  ${PROJECT_BINARY_DIR}/sprigConfig.cmake INSTALL_DESTINATION ${SPRIG_CMAKE_DIR})
write_basic_package_version_file(${PROJECT_BINARY_DIR}/sprigConfigVersion.cmake
  VERSION ${PROJECT_VERSION} COMPATIBILITY SameMajorVersion)
install(FILES ${PROJECT_BINARY_DIR}/sprigConfig.cmake ${PROJECT_BINARY_DIR}/sprigConfigVersion.cmake
  DESTINATION ${SPRIG_CMAKE_DIR})

# sprig.pc finds its prefix from its own location, so the package works wherever
# `cmake --install --prefix` puts it.
file(RELATIVE_PATH SPRIG_PC_TO_PREFIX "/${CMAKE_INSTALL_LIBDIR}/pkgconfig" "/")
string(REGEX REPLACE "/$" "" SPRIG_PC_TO_PREFIX "${SPRIG_PC_TO_PREFIX}")
# Static users also link the system libraries the runtime calls (Windows: psapi, shell32).
set(SPRIG_PC_SYSTEM_LIBS "")
foreach(lib ${SPRIG_SYSTEM_LIBRARIES})
  string(APPEND SPRIG_PC_SYSTEM_LIBS " -l${lib}")
endforeach()
configure_file(${PROJECT_SOURCE_DIR}/cmake/sprig.pc.in ${PROJECT_BINARY_DIR}/sprig.pc @ONLY)
install(FILES ${PROJECT_BINARY_DIR}/sprig.pc DESTINATION ${CMAKE_INSTALL_LIBDIR}/pkgconfig)
