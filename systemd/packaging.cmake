# Debian package of the station daemon (CPack DEB generator), included at the
# end of the top-level CMakeLists.txt. Build it in a Release build directory:
#
#   cmake -S . -B build-pkg -DCMAKE_BUILD_TYPE=Release -DTARN_TESTS=OFF
#   cmake --build build-pkg -j2 --target tarn
#   (cd build-pkg && cpack -G DEB)        ->  build-pkg/tarn_<version>-1_<arch>.deb
#
# Cross builds (arm64, armhf) use systemd/toolchain-*.cmake; see systemd/CROSS.md.
#
# Layout (Debian 12 paths; the unit goes to /lib/systemd/system as the
# distribution's own packages do before the /usr merge is complete):
#   /usr/bin/tarn                          the daemon and field tools
#   /lib/systemd/system/tarn.service       not enabled on install
#   /usr/lib/sysusers.d/tarn.conf          the tarn user, member of dialout
#   /usr/lib/tmpfiles.d/tarn.conf          /var/lib/tarn, /etc/tarn
#   /etc/tarn/station.json                 conffile: the single-fluorometer example
#   /usr/share/doc/tarn/                   examples/*.json, udev rule example, field guide
#   /usr/share/man/man1/tarn.1.gz          all subcommands
include_guard(GLOBAL)

set(TARN_SYSTEMD_UNIT_DIR "/lib/systemd/system" CACHE PATH "Where the package puts tarn.service")
set(TARN_SYSCONF_DIR "/etc/tarn" CACHE PATH "Where the package puts station.json")

# The executable itself is installed by daemon/CMakeLists.txt (bin/tarn).
install(FILES ${PROJECT_SOURCE_DIR}/systemd/tarn.service DESTINATION ${TARN_SYSTEMD_UNIT_DIR})
install(FILES ${PROJECT_SOURCE_DIR}/systemd/tarn.sysusers DESTINATION lib/sysusers.d
        RENAME tarn.conf)
install(FILES ${PROJECT_SOURCE_DIR}/systemd/tarn.tmpfiles DESTINATION lib/tmpfiles.d
        RENAME tarn.conf)
install(FILES ${PROJECT_SOURCE_DIR}/config/examples/single-fluorometer.json
        DESTINATION ${TARN_SYSCONF_DIR} RENAME station.json)
file(GLOB TARN_EXAMPLE_CONFIGS CONFIGURE_DEPENDS ${PROJECT_SOURCE_DIR}/config/examples/*.json)
install(FILES ${TARN_EXAMPLE_CONFIGS} DESTINATION share/doc/tarn/examples)
install(FILES ${PROJECT_SOURCE_DIR}/systemd/99-tarn-serial.rules
              ${PROJECT_SOURCE_DIR}/daemon/cli/FIELD-GUIDE.md
        DESTINATION share/doc/tarn)

# Man page, compressed as Debian policy asks (-n: no time stamp, reproducible).
set(TARN_MANPAGE_GZ ${PROJECT_BINARY_DIR}/systemd/tarn.1.gz)
add_custom_command(
  OUTPUT ${TARN_MANPAGE_GZ}
  COMMAND ${CMAKE_COMMAND} -E make_directory ${PROJECT_BINARY_DIR}/systemd
  COMMAND gzip -9 -n -c ${PROJECT_SOURCE_DIR}/daemon/cli/tarn.1 > ${TARN_MANPAGE_GZ}
  DEPENDS ${PROJECT_SOURCE_DIR}/daemon/cli/tarn.1
  COMMENT "Compressing the tarn(1) man page"
  VERBATIM)
add_custom_target(tarn_manpage ALL DEPENDS ${TARN_MANPAGE_GZ})
install(FILES ${TARN_MANPAGE_GZ} DESTINATION share/man/man1)

# ---- CPack ------------------------------------------------------------------------
set(CPACK_PACKAGE_NAME "tarn")
set(CPACK_PACKAGE_VERSION "${PROJECT_VERSION}")
set(CPACK_PACKAGE_VENDOR "tarn developers")
set(CPACK_PACKAGE_DESCRIPTION_SUMMARY
    "lake monitoring station daemon: fluorometers, QC flags, store and forward")
set(CPACK_PACKAGE_DESCRIPTION
    "tarn runs on the single-board computer of a lake or reservoir monitoring station.\n"
    "It polls fluorometers (chlorophyll-a, phycocyanin, phycoerythrin) and temperature\n"
    "probes on serial and RS-485 lines, flags every sample with QARTOD quality flags,\n"
    "packs flagged windows into a compact binary format, queues them durably in SQLite\n"
    "and sends them over MQTT or a serial radio when the link allows. Bloom alert\n"
    "levels support and never replace laboratory analysis and the decisions of the\n"
    "local health or water authority.\n"
    "The service is installed but not enabled: edit /etc/tarn/station.json, check it\n"
    "with `tarn check`, then `systemctl enable --now tarn`.")
string(REPLACE ";" "" CPACK_PACKAGE_DESCRIPTION "${CPACK_PACKAGE_DESCRIPTION}")
set(CPACK_PACKAGING_INSTALL_PREFIX "/usr")
set(CPACK_STRIP_FILES ON)
set(CPACK_GENERATOR "DEB")

set(CPACK_DEBIAN_PACKAGE_NAME "tarn")
set(CPACK_DEBIAN_FILE_NAME "DEB-DEFAULT")
set(CPACK_DEBIAN_PACKAGE_RELEASE "1")
set(CPACK_DEBIAN_PACKAGE_MAINTAINER "tarn developers <tarn-dev@example.invalid>")
set(CPACK_DEBIAN_PACKAGE_SECTION "science")
set(CPACK_DEBIAN_PACKAGE_PRIORITY "optional")
# Run-time libraries come from dpkg-shlibdeps on the stripped binary.
set(CPACK_DEBIAN_PACKAGE_SHLIBDEPS ON)
# The maintainer scripts use systemd-sysusers/systemd-tmpfiles, or adduser without them.
set(CPACK_DEBIAN_PACKAGE_DEPENDS "systemd | adduser")
set(CPACK_DEBIAN_PACKAGE_SUGGESTS "mosquitto-clients")
set(CPACK_DEBIAN_PACKAGE_CONTROL_EXTRA
    ${PROJECT_SOURCE_DIR}/systemd/debian/conffiles ${PROJECT_SOURCE_DIR}/systemd/debian/postinst
    ${PROJECT_SOURCE_DIR}/systemd/debian/prerm ${PROJECT_SOURCE_DIR}/systemd/debian/postrm)
# Scripts 0755, conffiles 0644, whatever the checkout's modes are.
set(CPACK_DEBIAN_PACKAGE_CONTROL_STRICT_PERMISSION TRUE)
# Cross builds: the toolchain file names the Debian architecture (dpkg's name).
if(CMAKE_CROSSCOMPILING AND TARN_DEB_ARCHITECTURE)
  set(CPACK_DEBIAN_PACKAGE_ARCHITECTURE "${TARN_DEB_ARCHITECTURE}")
endif()

include(CPack)
