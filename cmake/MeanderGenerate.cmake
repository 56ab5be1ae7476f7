# meander_generate(<target> DESCRIPTION <file.mnd>
#                  [OUTPUT_DIR <dir>] [PRECISION float32|float64] [C_HEADER]
#                  [SELF_TEST <inputs.csv>])
#
# Emits C++ for a description at build time and makes it a static library
# <target> whose include folder holds <model>.hpp. The emitted files are
# regenerated whenever the description, its weights, the self-test inputs or
# the meander binary change. SELF_TEST adds <model>_selftest.hpp/.cpp (the
# inputs with eval's outputs, and self_test() to run them on the target).
# C_HEADER adds <model>.h, a plain C header, for C callers.
#
# Which meander runs: inside this project, the freshly built `meander` target;
# elsewhere the MEANDER_EXECUTABLE variable when set (a cache entry, so
# -DMEANDER_EXECUTABLE=/path/to/meander on the command line works), else the
# first `meander` on PATH (find_program; configuring fails when there is none).
# An unknown keyword or a keyword without its value stops the configure step.
function(meander_generate target)
  cmake_parse_arguments(MG "C_HEADER" "DESCRIPTION;OUTPUT_DIR;PRECISION;SELF_TEST" "" ${ARGN})
  if(MG_UNPARSED_ARGUMENTS)
    message(FATAL_ERROR "meander_generate(${target}): unknown argument(s) ${MG_UNPARSED_ARGUMENTS} "
                        "(known: DESCRIPTION, OUTPUT_DIR, PRECISION, C_HEADER, SELF_TEST)")
  endif()
  if(MG_KEYWORDS_MISSING_VALUES)
    message(FATAL_ERROR "meander_generate(${target}): ${MG_KEYWORDS_MISSING_VALUES} needs a value")
  endif()
  if(MG_PRECISION AND NOT MG_PRECISION MATCHES "^(float32|float64)$")
    message(FATAL_ERROR "meander_generate(${target}): PRECISION is float32 or float64, not '${MG_PRECISION}'")
  endif()
  if(NOT MG_DESCRIPTION)
    message(FATAL_ERROR "meander_generate(${target}): DESCRIPTION is required")
  endif()
  get_filename_component(desc "${MG_DESCRIPTION}" ABSOLUTE)
  get_filename_component(desc_dir "${desc}" DIRECTORY)
  if(NOT MG_OUTPUT_DIR)
    set(MG_OUTPUT_DIR "${CMAKE_CURRENT_BINARY_DIR}/${target}")
  endif()
  if(NOT MG_PRECISION)
    set(MG_PRECISION float32)
  endif()

  # The model name and the weights path, read from the description so the
  # outputs and dependencies are known when CMake configures.
  file(STRINGS "${desc}" model_line REGEX "^[ \t]*model[ \t]+[A-Za-z_][A-Za-z0-9_]*" LIMIT_COUNT 1)
  string(REGEX REPLACE "^[ \t]*model[ \t]+([A-Za-z_][A-Za-z0-9_]*).*" "\\1" model "${model_line}")
  if(NOT model)
    message(FATAL_ERROR "meander_generate(${target}): no 'model NAME' line in ${desc}")
  endif()
  file(STRINGS "${desc}" weights_line REGEX "^[ \t]*weights[ \t]+\"[^\"]*\"" LIMIT_COUNT 1)
  string(REGEX REPLACE "^[ \t]*weights[ \t]+\"([^\"]*)\".*" "\\1" weights "${weights_line}")
  set(deps "${desc}")
  if(weights)
    get_filename_component(weights "${weights}" ABSOLUTE BASE_DIR "${desc_dir}")
    if(IS_DIRECTORY "${weights}")
      file(GLOB weight_files CONFIGURE_DEPENDS "${weights}/*.npy")
      list(APPEND deps ${weight_files})
    else()
      list(APPEND deps "${weights}")
    endif()
  endif()

  if(TARGET meander)
    set(tool "$<TARGET_FILE:meander>")
    list(APPEND deps meander)
  else()
    if(NOT MEANDER_EXECUTABLE)
      find_program(MEANDER_EXECUTABLE meander REQUIRED)
    endif()
    set(tool "${MEANDER_EXECUTABLE}")
    list(APPEND deps "${MEANDER_EXECUTABLE}")
  endif()

  set(extra)
  set(outputs "${MG_OUTPUT_DIR}/${model}.hpp" "${MG_OUTPUT_DIR}/${model}.cpp")
  if(MG_C_HEADER)
    list(APPEND extra --c-header)
    list(APPEND outputs "${MG_OUTPUT_DIR}/${model}.h")
  endif()
  set(sources "${MG_OUTPUT_DIR}/${model}.cpp")
  if(MG_SELF_TEST)
    get_filename_component(self_test "${MG_SELF_TEST}" ABSOLUTE)
    list(APPEND extra --self-test "${self_test}")
    list(APPEND deps "${self_test}")
    list(APPEND outputs "${MG_OUTPUT_DIR}/${model}_selftest.hpp" "${MG_OUTPUT_DIR}/${model}_selftest.cpp")
    list(APPEND sources "${MG_OUTPUT_DIR}/${model}_selftest.cpp")
  endif()
  add_custom_command(
    OUTPUT ${outputs}
    COMMAND "${tool}" compile "${desc}" -o "${MG_OUTPUT_DIR}" --precision ${MG_PRECISION} ${extra}
    DEPENDS ${deps}
    COMMENT "meander: emitting ${model} from ${MG_DESCRIPTION}"
    VERBATIM)
  add_library(${target} STATIC ${sources})
  target_include_directories(${target} PUBLIC "${MG_OUTPUT_DIR}")
  target_compile_features(${target} PUBLIC cxx_std_17)
endfunction()
