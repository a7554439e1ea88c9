# arm-none-eabi.cmake - CMake toolchain file for the Cortex-M builds of the reference
# firmware (arm-none-eabi-gcc with newlib; Debian: gcc-arm-none-eabi libnewlib-arm-none-eabi).
# CMakeLists.txt uses it when -DHT_CPU=cortex-m4 | cortex-m3 | cortex-m0plus is given.

set(CMAKE_SYSTEM_NAME Generic)
set(CMAKE_SYSTEM_PROCESSOR arm)
set(CMAKE_C_COMPILER arm-none-eabi-gcc)
# The compiler check links no program: the real link needs our startup and linker script.
set(CMAKE_TRY_COMPILE_TARGET_TYPE STATIC_LIBRARY)
set(CMAKE_FIND_ROOT_PATH_MODE_PROGRAM NEVER)
