# Sanitizer and fuzzing builds (DEVELOPERS.md "Sanitizers and fuzzing").
#
#   -DWAVESTACK_SANITIZE=ON                  AddressSanitizer + UndefinedBehaviorSanitizer
#   -DWAVESTACK_SANITIZE=address,undefined   the same, or any other -fsanitize= list
#   -DWAVESTACK_FUZZ=ON                      libFuzzer targets in fuzz/ (clang only); every
#                                            library gets coverage instrumentation and
#                                            address,undefined unless WAVESTACK_SANITIZE says otherwise
#
# The flags apply to every target of the build (libraries, tests, the
# program), so include this before the add_subdirectory() calls. Debian's
# FFTW, HDF5, OpenCV and TBB are not instrumented: ASan still sees every
# allocation they make through malloc, but not their own out-of-bounds reads.
set(WAVESTACK_SANITIZE "" CACHE STRING "Sanitizers: ON (= address,undefined) or a -fsanitize= list; empty for none")
option(WAVESTACK_FUZZ "Build the libFuzzer targets in fuzz/ (needs clang)" OFF)

set(WAVESTACK_SANITIZERS "")
if(WAVESTACK_SANITIZE)
  if(WAVESTACK_SANITIZE STREQUAL "ON" OR WAVESTACK_SANITIZE STREQUAL "1" OR WAVESTACK_SANITIZE STREQUAL "TRUE")
    set(WAVESTACK_SANITIZERS "address,undefined")
  else()
    set(WAVESTACK_SANITIZERS "${WAVESTACK_SANITIZE}")
  endif()
elseif(WAVESTACK_FUZZ)
  set(WAVESTACK_SANITIZERS "address,undefined")
endif()

if(WAVESTACK_FUZZ AND NOT CMAKE_CXX_COMPILER_ID STREQUAL "Clang")
  message(FATAL_ERROR "WAVESTACK_FUZZ needs clang (libFuzzer), e.g. -DCMAKE_C_COMPILER=clang-14 "
                      "-DCMAKE_CXX_COMPILER=clang++-14; this build uses ${CMAKE_CXX_COMPILER_ID}")
endif()

if(WAVESTACK_SANITIZERS)
  message(STATUS "wavestack: sanitizers ${WAVESTACK_SANITIZERS}")
  # Frame pointers give ASan cheap, complete stack traces; a UBSan finding
  # aborts the test instead of printing a line that nobody reads.
  add_compile_options(-fsanitize=${WAVESTACK_SANITIZERS} -fno-omit-frame-pointer)
  add_link_options(-fsanitize=${WAVESTACK_SANITIZERS})
  if(WAVESTACK_SANITIZERS MATCHES "undefined")
    add_compile_options(-fno-sanitize-recover=undefined)
    add_link_options(-fno-sanitize-recover=undefined)
  endif()
endif()

if(WAVESTACK_FUZZ)
  # Coverage feedback for libFuzzer in every library; only the fuzz
  # programs link libFuzzer's main (-fsanitize=fuzzer, fuzz/CMakeLists.txt).
  add_compile_options(-fsanitize=fuzzer-no-link)
endif()
