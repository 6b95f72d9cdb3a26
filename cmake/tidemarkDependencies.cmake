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
# A library that ships neither pkg-config nor CMake files, as the imported target
# tidemark_deps::NAME: its library file LIBRARY and the folder holding HEADER.
function(tidemark_import_library name library header)
  if(TARGET tidemark_deps::${name})
    return()
  endif()
  string(TOUPPER ${name} upper)
  find_library(TIDEMARK_${upper}_LIBRARY NAMES ${library} REQUIRED)
  find_path(TIDEMARK_${upper}_INCLUDE_DIR ${header} REQUIRED)
  add_library(tidemark_deps::${name} UNKNOWN IMPORTED)
  set_target_properties(tidemark_deps::${name} PROPERTIES
                        IMPORTED_LOCATION ${TIDEMARK_${upper}_LIBRARY}
                        INTERFACE_INCLUDE_DIRECTORIES ${TIDEMARK_${upper}_INCLUDE_DIR})
endfunction()
# Debian's libbigwig-dev: reads bigWig tracks back (merge); tidemark writes them itself
tidemark_import_library(BigWig BigWig bigWig.h)
# Debian's libisal-dev: streaming gzip inflate, several times as fast as zlib's
tidemark_import_library(isal isal isa-l/igzip_lib.h)
# Debian's libdeflate-dev: compresses bigWig blocks (src/bigwig_write.cpp), inflates libBigWig's
# (src/bigwig.cpp)
tidemark_import_library(deflate deflate libdeflate.h)
if(NOT TARGET PkgConfig::ZSTD)
  # Debian's libzstd-dev: zstd input, read with its own calls so that truncation is seen
  pkg_check_modules(ZSTD REQUIRED IMPORTED_TARGET libzstd)
endif()
