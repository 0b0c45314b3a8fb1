# Installing freegap under the usual prefix layout, its CMake package, a Debian package (CPack) and
# an environment module (docs/install.md):
#   bin/freegap, bin/freegap-plugin-host       the executable and the program plug-ins run in
#   include/freegap/estimator_abi.h            the plug-in ABI (target freegap::plugin_abi)
#   lib/cmake/freegap/                         find_package(freegap): freegap::freegap, ::plugin_abi
#   share/freegap/analysis/                    plotting scripts, found relative to bin/freegap
#   share/freegap/python/freegap_results.py    reading run files and reports from Python
#   share/freegap/jobs/, share/freegap/slurm/  example jobs and the Slurm batch scripts
#   share/freegap/modulefiles/freegap/VERSION  an environment module (Tcl: Environment Modules, Lmod)
#   share/doc/freegap/                         README, LICENSE and docs/
include(CMakePackageConfigHelpers)

# FREEGAP_INSTALL_SHARE is set in the top-level CMakeLists.txt (the executable needs it too).
set(FREEGAP_INSTALL_CMAKE ${CMAKE_INSTALL_LIBDIR}/cmake/freegap)

# The plug-in ABI as a header-only target: what an estimator built out of tree links against.
add_library(freegap_plugin_abi INTERFACE)
add_library(freegap::plugin_abi ALIAS freegap_plugin_abi)
set_target_properties(freegap_plugin_abi PROPERTIES EXPORT_NAME plugin_abi)
target_include_directories(freegap_plugin_abi INTERFACE
  $<BUILD_INTERFACE:${PROJECT_SOURCE_DIR}/include>
  $<INSTALL_INTERFACE:${CMAKE_INSTALL_INCLUDEDIR}>)
set_target_properties(freegap PROPERTIES EXPORT_NAME freegap)

install(TARGETS freegap freegap_plugin_abi EXPORT freegapTargets
        RUNTIME DESTINATION ${CMAKE_INSTALL_BINDIR})
# The helper program that loads and runs plug-ins; freegap finds it beside itself.
install(TARGETS freegap_plugin_host RUNTIME DESTINATION ${CMAKE_INSTALL_BINDIR})
install(FILES ${PROJECT_SOURCE_DIR}/include/freegap/estimator_abi.h
        DESTINATION ${CMAKE_INSTALL_INCLUDEDIR}/freegap)
install(EXPORT freegapTargets NAMESPACE freegap:: DESTINATION ${FREEGAP_INSTALL_CMAKE})
configure_package_config_file(${CMAKE_CURRENT_LIST_DIR}/freegapConfig.cmake.in
                              ${PROJECT_BINARY_DIR}/install/freegapConfig.cmake
                              INSTALL_DESTINATION ${FREEGAP_INSTALL_CMAKE}
                              PATH_VARS FREEGAP_INSTALL_SHARE)
write_basic_package_version_file(${PROJECT_BINARY_DIR}/install/freegapConfigVersion.cmake
                                 COMPATIBILITY SameMajorVersion)
install(FILES ${PROJECT_BINARY_DIR}/install/freegapConfig.cmake
              ${PROJECT_BINARY_DIR}/install/freegapConfigVersion.cmake
        DESTINATION ${FREEGAP_INSTALL_CMAKE})

file(GLOB FREEGAP_PLOT_SCRIPTS ${PROJECT_SOURCE_DIR}/analysis/plot_*.py)
install(PROGRAMS ${FREEGAP_PLOT_SCRIPTS} DESTINATION ${FREEGAP_INSTALL_SHARE}/analysis)
install(FILES ${PROJECT_SOURCE_DIR}/analysis/freegap_results.py
        DESTINATION ${FREEGAP_INSTALL_SHARE}/python)
file(GLOB FREEGAP_EXAMPLE_JOBS ${PROJECT_SOURCE_DIR}/jobs/*.toml)
install(FILES ${FREEGAP_EXAMPLE_JOBS} DESTINATION ${FREEGAP_INSTALL_SHARE}/jobs)
install(PROGRAMS ${PROJECT_SOURCE_DIR}/jobs/estimators/second_moment.py
        DESTINATION ${FREEGAP_INSTALL_SHARE}/jobs/estimators)
file(GLOB FREEGAP_SLURM_SCRIPTS ${PROJECT_SOURCE_DIR}/jobs/slurm/*.sbatch)
install(PROGRAMS ${FREEGAP_SLURM_SCRIPTS} DESTINATION ${FREEGAP_INSTALL_SHARE}/slurm)
file(GLOB FREEGAP_DOCS ${PROJECT_SOURCE_DIR}/docs/*.md)
install(FILES ${PROJECT_SOURCE_DIR}/README.md ${PROJECT_SOURCE_DIR}/LICENSE
        DESTINATION ${CMAKE_INSTALL_DOCDIR})
install(FILES ${FREEGAP_DOCS} DESTINATION ${CMAKE_INSTALL_DOCDIR}/docs)

# The module file names the prefix it was installed under, which is known only at install time
# (cmake --install --prefix, or CPack's /usr).
install(CODE "
  set(FREEGAP_MODULE_PREFIX \"\${CMAKE_INSTALL_PREFIX}\")
  set(FREEGAP_MODULE_VERSION \"${PROJECT_VERSION}\")
  configure_file(\"${CMAKE_CURRENT_LIST_DIR}/modulefile.tcl.in\"
                 \"\$ENV{DESTDIR}\${CMAKE_INSTALL_PREFIX}/${FREEGAP_INSTALL_SHARE}/modulefiles/freegap/${PROJECT_VERSION}\"
                 @ONLY)
  message(STATUS \"Installing: \$ENV{DESTDIR}\${CMAKE_INSTALL_PREFIX}/${FREEGAP_INSTALL_SHARE}/modulefiles/freegap/${PROJECT_VERSION}\")
")

# A Debian package: `cpack -G DEB` in the build directory. Library dependencies are found by
# dpkg-shlibdeps; the programs freegap starts (mpirun, python3 for figures) are declared here.
set(CPACK_GENERATOR DEB)
set(CPACK_PACKAGE_NAME freegap)
set(CPACK_PACKAGE_VENDOR "freegap developers")
set(CPACK_PACKAGE_CONTACT "freegap developers <freegap@localhost>")
set(CPACK_PACKAGE_DESCRIPTION_SUMMARY
    "finite-N random matrix studies on clusters, measured against free-probability limits")
set(CPACK_PACKAGING_INSTALL_PREFIX /usr)
set(CPACK_DEBIAN_FILE_NAME DEB-DEFAULT)
set(CPACK_DEBIAN_PACKAGE_SECTION science)
set(CPACK_DEBIAN_PACKAGE_SHLIBDEPS ON)
set(CPACK_DEBIAN_PACKAGE_DEPENDS "openmpi-bin, python3, python3-numpy, python3-h5py")
set(CPACK_DEBIAN_PACKAGE_RECOMMENDS "python3-matplotlib, python3-scipy")
set(CPACK_DEBIAN_PACKAGE_SUGGESTS "environment-modules | lmod, slurm-client")
include(CPack)
