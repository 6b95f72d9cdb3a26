# The libraries libtidemark links, found the same way by tidemark's own build and by projects
# that use the installed package (tidemarkConfig.cmake includes this file). htslib ships no
# CMake files (pkg-config instead); libBigWig and ISA-L ship neither, so they become imported
# targets here. Every target made here is what the exported tidemark::tidemark names.
include(CMakeFindDependencyMacro)
find_dependency(PkgConfig)
if(NOT TARGET PkgConfig::HTSLIB)
  pkg_check_modules(HTSLIB REQUIRED IMPORTED_TARGET htslib)
endif()
find_dependency(Boost 1.74 COMPONENTS iostreams)
find_dependency(nlohmann_json 3.10)
find_dependency(fmt)
find_dependency(ZLIB)
if(NOT TARGET tidemark_deps::BigWig)
  # Debian's libbigwig-dev
  find_library(TIDEMARK_BIGWIG_LIBRARY NAMES BigWig REQUIRED)
  find_path(TIDEMARK_BIGWIG_INCLUDE_DIR bigWig.h REQUIRED)
  add_library(tidemark_deps::BigWig UNKNOWN IMPORTED)
  set_target_properties(tidemark_deps::BigWig PROPERTIES IMPORTED_LOCATION ${TIDEMARK_BIGWIG_LIBRARY}
                        INTERFACE_INCLUDE_DIRECTORIES ${TIDEMARK_BIGWIG_INCLUDE_DIR})
endif()
if(NOT TARGET tidemark_deps::isal)
  # Debian's libisal-dev: streaming gzip inflate, several times as fast as zlib's
  find_library(TIDEMARK_ISAL_LIBRARY NAMES isal REQUIRED)
  find_path(TIDEMARK_ISAL_INCLUDE_DIR isa-l/igzip_lib.h REQUIRED)
  add_library(tidemark_deps::isal UNKNOWN IMPORTED)
  set_target_properties(tidemark_deps::isal PROPERTIES IMPORTED_LOCATION ${TIDEMARK_ISAL_LIBRARY}
                        INTERFACE_INCLUDE_DIRECTORIES ${TIDEMARK_ISAL_INCLUDE_DIR})
endif()
if(NOT TARGET PkgConfig::ZSTD)
  # Debian's libzstd-dev: zstd input, read with its own calls so that truncation is seen
  pkg_check_modules(ZSTD REQUIRED IMPORTED_TARGET libzstd)
endif()
if(NOT TARGET tidemark_deps::deflate)
  # Debian's libdeflate-dev: compresses libBigWig's blocks (src/bigwig.cpp)
  find_library(TIDEMARK_DEFLATE_LIBRARY NAMES deflate REQUIRED)
  find_path(TIDEMARK_DEFLATE_INCLUDE_DIR libdeflate.h REQUIRED)
  add_library(tidemark_deps::deflate UNKNOWN IMPORTED)
  set_target_properties(tidemark_deps::deflate PROPERTIES IMPORTED_LOCATION ${TIDEMARK_DEFLATE_LIBRARY}
                        INTERFACE_INCLUDE_DIRECTORIES ${TIDEMARK_DEFLATE_INCLUDE_DIR})
endif()
