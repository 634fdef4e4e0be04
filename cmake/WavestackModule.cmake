# wavestack_add_module(<name> [DEPENDS <module>...] [LIBS <target>...])
# Creates library wavestack_<name> (alias wavestack::<name>) from
# modules/<name>/src/*.cpp with public headers in modules/<name>/include.
function(wavestack_warnings target)
  target_compile_options(${target} PRIVATE -Wall -Wextra -Wpedantic)
  if(WAVESTACK_WERROR)
    target_compile_options(${target} PRIVATE -Werror)
  endif()
endfunction()

function(wavestack_add_module name)
  cmake_parse_arguments(M "" "" "DEPENDS;LIBS" ${ARGN})
  file(GLOB sources CONFIGURE_DEPENDS ${CMAKE_CURRENT_SOURCE_DIR}/src/*.cpp)
  add_library(wavestack_${name} STATIC ${sources})
  add_library(wavestack::${name} ALIAS wavestack_${name})
  target_include_directories(wavestack_${name} PUBLIC ${CMAKE_CURRENT_SOURCE_DIR}/include)
  foreach(dep IN LISTS M_DEPENDS)
    target_link_libraries(wavestack_${name} PUBLIC wavestack::${dep})
  endforeach()
  target_link_libraries(wavestack_${name} PUBLIC ${M_LIBS})
  wavestack_warnings(wavestack_${name})
endfunction()

# wavestack_add_tests(<module> [LIBS <target>...])
# One Catch2 executable test_<module> from tests/<module>/test_*.cpp; every
# TEST_CASE becomes a ctest test through catch_discover_tests.
function(wavestack_add_tests module)
  cmake_parse_arguments(T "" "" "LIBS" ${ARGN})
  file(GLOB sources CONFIGURE_DEPENDS ${CMAKE_CURRENT_SOURCE_DIR}/test_*.cpp)
  if(NOT sources)
    return()
  endif()
  add_executable(test_${module} ${sources})
  target_link_libraries(test_${module} PRIVATE wavestack_test_main ${T_LIBS})
  target_compile_definitions(test_${module} PRIVATE
    WAVESTACK_SOURCE_DIR="${PROJECT_SOURCE_DIR}"
    WAVESTACK_BINARY_DIR="${PROJECT_BINARY_DIR}")
  wavestack_warnings(test_${module})
  catch_discover_tests(test_${module} TEST_PREFIX "${module}: "
    PROPERTIES LABELS ${module})
endfunction()
