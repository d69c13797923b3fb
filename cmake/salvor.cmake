# Shared build settings for salvor targets: flags are set per target, never globally.

function(salvor_target_defaults target)
  target_compile_options(${target} PRIVATE -Wall -Wextra -Wno-unused-parameter)
  target_compile_features(${target} PUBLIC cxx_std_20)
endfunction()

# salvor_add_stage(NAME SOURCES... [DEPENDS targets...])
# One static library per pipeline stage, named salvor_<NAME>, include root = core/.
function(salvor_add_stage name)
  cmake_parse_arguments(ARG "" "" "SOURCES;DEPENDS" ${ARGN})
  add_library(salvor_${name} STATIC ${ARG_SOURCES})
  target_include_directories(salvor_${name} PUBLIC ${PROJECT_SOURCE_DIR}/core)
  target_link_libraries(salvor_${name} PUBLIC ${ARG_DEPENDS})
  salvor_target_defaults(salvor_${name})
endfunction()

# salvor_add_detector(NAME SOURCES... [DEPENDS targets...])
# A detector plugin: a MODULE library with hidden symbols; only the C entry point is exported.
function(salvor_add_detector name)
  cmake_parse_arguments(ARG "" "" "SOURCES;DEPENDS" ${ARGN})
  add_library(salvor_detector_${name} MODULE ${ARG_SOURCES})
  target_include_directories(salvor_detector_${name} PRIVATE ${PROJECT_SOURCE_DIR}/core)
  target_link_libraries(salvor_detector_${name} PRIVATE ${ARG_DEPENDS})
  set_target_properties(salvor_detector_${name} PROPERTIES
    PREFIX "" OUTPUT_NAME "${name}"
    LIBRARY_OUTPUT_DIRECTORY ${SALVOR_PLUGIN_BUILD_DIR}
    C_VISIBILITY_PRESET hidden CXX_VISIBILITY_PRESET hidden VISIBILITY_INLINES_HIDDEN ON)
  salvor_target_defaults(salvor_detector_${name})
  install(TARGETS salvor_detector_${name} LIBRARY DESTINATION ${SALVOR_PLUGIN_SUBDIR})
endfunction()

# salvor_add_test(NAME SOURCES... [DEPENDS targets...] [LABELS labels...])
function(salvor_add_test name)
  cmake_parse_arguments(ARG "" "" "SOURCES;DEPENDS;LABELS" ${ARGN})
  add_executable(${name} ${ARG_SOURCES})
  target_link_libraries(${name} PRIVATE ${ARG_DEPENDS} GTest::gtest GTest::gtest_main)
  target_include_directories(${name} PRIVATE ${PROJECT_SOURCE_DIR}/tests/common)
  target_compile_definitions(${name} PRIVATE
    SALVOR_SOURCE_DIR="${PROJECT_SOURCE_DIR}"
    SALVOR_ORACLE_PYTHON="${SALVOR_ORACLE_PYTHON}"
    SALVOR_BIN_DIR="${CMAKE_BINARY_DIR}/bin"
    SALVOR_PLUGIN_BUILD_DIR="${SALVOR_PLUGIN_BUILD_DIR}")
  salvor_target_defaults(${name})
  if(NOT ARG_LABELS)
    set(ARG_LABELS unit)
  endif()
  gtest_discover_tests(${name} PROPERTIES LABELS "${ARG_LABELS}" DISCOVERY_TIMEOUT 60)
endfunction()
