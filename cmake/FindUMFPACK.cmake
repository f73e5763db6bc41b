# FindUMFPACK.cmake - locate SuiteSparse UMFPACK (Debian: libsuitesparse-dev).
# Debian's SuiteSparse 5.12 ships neither a CMake config nor a pkg-config
# file, so look for the header and libraries directly.
# Defines the imported target UMFPACK::UMFPACK.
find_path(UMFPACK_INCLUDE_DIR umfpack.h PATH_SUFFIXES suitesparse)
find_library(UMFPACK_LIBRARY umfpack)
find_library(UMFPACK_AMD_LIBRARY amd)
find_library(UMFPACK_SSCONFIG_LIBRARY suitesparseconfig)
include(FindPackageHandleStandardArgs)
find_package_handle_standard_args(UMFPACK
  REQUIRED_VARS UMFPACK_LIBRARY UMFPACK_INCLUDE_DIR UMFPACK_AMD_LIBRARY UMFPACK_SSCONFIG_LIBRARY
  REASON_FAILURE_MESSAGE "install the Debian package libsuitesparse-dev")
if(UMFPACK_FOUND AND NOT TARGET UMFPACK::UMFPACK)
  add_library(UMFPACK::UMFPACK INTERFACE IMPORTED)
  set_target_properties(UMFPACK::UMFPACK PROPERTIES
    INTERFACE_INCLUDE_DIRECTORIES "${UMFPACK_INCLUDE_DIR}"
    INTERFACE_LINK_LIBRARIES "${UMFPACK_LIBRARY};${UMFPACK_AMD_LIBRARY};${UMFPACK_SSCONFIG_LIBRARY}")
endif()
mark_as_advanced(UMFPACK_INCLUDE_DIR UMFPACK_LIBRARY UMFPACK_AMD_LIBRARY UMFPACK_SSCONFIG_LIBRARY)
