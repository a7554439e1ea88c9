# ht_check.cmake - run a built ht_runner on check vectors and compare with the model.
#
#   cmake -DPROGRAM=exe -DINPUT=NAME.in -DEXPECTED=NAME.expected -DOUTPUT=NAME.out
#         [-DBOARD=mps2-an386 -DQEMU=qemu-system-arm] -P ht_check.cmake
#
# With BOARD the program is a Cortex-M image run under QEMU with semihosting (stdin and
# stdout are QEMU's, its exit status the program's). Fails unless the program exits with
# status 0 and its stdout equals EXPECTED byte for byte.

foreach(var PROGRAM INPUT EXPECTED OUTPUT)
  if(NOT DEFINED ${var})
    message(FATAL_ERROR "ht_check.cmake: -D${var}=... is missing")
  endif()
endforeach()
if(NOT EXISTS "${INPUT}")
  message(FATAL_ERROR "no ${INPUT}: write it with hosttool firmware -o DIR --spec SPEC.toml")
endif()
if(BOARD)
  set(command "${QEMU}" -M "${BOARD}" -nographic -monitor none -serial none
      -semihosting-config enable=on,target=native -kernel "${PROGRAM}")
else()
  set(command "${PROGRAM}")
endif()
execute_process(COMMAND ${command} INPUT_FILE "${INPUT}" OUTPUT_FILE "${OUTPUT}"
                RESULT_VARIABLE status ERROR_VARIABLE errors)
if(NOT status EQUAL 0)
  message(FATAL_ERROR "${PROGRAM} exited with status ${status}: ${errors}")
endif()
execute_process(COMMAND "${CMAKE_COMMAND}" -E compare_files "${OUTPUT}" "${EXPECTED}"
                RESULT_VARIABLE differ)
if(differ)
  message(FATAL_ERROR "${OUTPUT} differs from ${EXPECTED} (hosttool's integer model)")
endif()
file(STRINGS "${EXPECTED}" lines)
list(LENGTH lines count)
message(STATUS "${count} outputs equal hosttool's integer model, bit for bit")
