# Cross build of tarn for arm64 boards with Debian's cross toolchain and
# multiarch -dev packages (systemd/CROSS.md):
#   cmake -S . -B build-arm64 -DCMAKE_TOOLCHAIN_FILE=systemd/toolchain-aarch64.cmake \
#         -DCMAKE_BUILD_TYPE=Release -DTARN_TESTS=OFF
set(CMAKE_SYSTEM_NAME Linux)
set(CMAKE_SYSTEM_PROCESSOR aarch64)
set(TARN_CROSS_TRIPLE aarch64-linux-gnu)
set(CMAKE_C_COMPILER ${TARN_CROSS_TRIPLE}-gcc)
set(CMAKE_CXX_COMPILER ${TARN_CROSS_TRIPLE}-g++)
# Debian multiarch: target libraries live in /usr/lib/${TARN_CROSS_TRIPLE}, headers
# in /usr/include (shared) and /usr/include/${TARN_CROSS_TRIPLE}.
set(CMAKE_LIBRARY_ARCHITECTURE ${TARN_CROSS_TRIPLE})
set(CMAKE_FIND_ROOT_PATH /usr/${TARN_CROSS_TRIPLE})
set(CMAKE_FIND_ROOT_PATH_MODE_PROGRAM NEVER)
set(CMAKE_FIND_ROOT_PATH_MODE_LIBRARY BOTH)
set(CMAKE_FIND_ROOT_PATH_MODE_INCLUDE BOTH)
set(CMAKE_FIND_ROOT_PATH_MODE_PACKAGE BOTH)
# pkg-config must see the target's .pc files only, not the build machine's.
set(ENV{PKG_CONFIG_LIBDIR} /usr/lib/${TARN_CROSS_TRIPLE}/pkgconfig:/usr/share/pkgconfig)
set(ENV{PKG_CONFIG_PATH} "")
# systemd/packaging.cmake: the package's Architecture field (dpkg's name).
set(TARN_DEB_ARCHITECTURE arm64)
