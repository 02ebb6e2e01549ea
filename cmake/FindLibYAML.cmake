# SPDX-License-Identifier: MIT
# Finds libyaml (the YAML 1.1 parser the plan reader uses) and defines the
# imported target LibYAML::LibYAML. libyaml ships no CMake package: its
# pkg-config module (yaml-0.1) is a hint when pkg-config is there, a plain
# search of the usual directories otherwise. Installed with splitlot's CMake
# package, so a program using splitlot::splitlot finds libyaml the same way.
find_package(PkgConfig QUIET)
if(PKG_CONFIG_FOUND)
  pkg_check_modules(PC_LIBYAML QUIET yaml-0.1)
endif()
find_path(LibYAML_INCLUDE_DIR NAMES yaml.h HINTS ${PC_LIBYAML_INCLUDE_DIRS})
find_library(LibYAML_LIBRARY NAMES yaml HINTS ${PC_LIBYAML_LIBRARY_DIRS})
set(LibYAML_VERSION ${PC_LIBYAML_VERSION})

include(FindPackageHandleStandardArgs)
find_package_handle_standard_args(LibYAML
  REQUIRED_VARS LibYAML_LIBRARY LibYAML_INCLUDE_DIR
  VERSION_VAR LibYAML_VERSION)

if(LibYAML_FOUND AND NOT TARGET LibYAML::LibYAML)
  add_library(LibYAML::LibYAML UNKNOWN IMPORTED)
  set_target_properties(LibYAML::LibYAML PROPERTIES
    IMPORTED_LOCATION "${LibYAML_LIBRARY}"
    INTERFACE_INCLUDE_DIRECTORIES "${LibYAML_INCLUDE_DIR}")
endif()
mark_as_advanced(LibYAML_INCLUDE_DIR LibYAML_LIBRARY)
