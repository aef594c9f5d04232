#!/usr/bin/python3
"""The Debian package (systemd/packaging.cmake): build it from a Release
configure, install it with dpkg into a scratch root, run what it installed.

Steps and what each checks:
  1. configure Release (tests off) in a build dir of its own, build `tarn`
     (-j2), `cpack -G DEB`.
  2. the control archive (dpkg-deb -I/-e): name, version = project version,
     architecture = dpkg --print-architecture, shared-library Depends from
     dpkg-shlibdeps, conffiles lists /etc/tarn/station.json, maintainer
     scripts 0755, no script line that enables or starts the service.
  3. the data archive (dpkg-deb -c): the binary, unit, sysusers, tmpfiles,
     config, examples, udev example, man page.
  4. `dpkg --root R --force-script-chrootless -i`: the maintainer scripts
     run against R (they honour DPKG_ROOT): user tarn in R/etc/passwd and in
     dialout, R/var/lib/tarn 0750 tarn, station.json 0640 group tarn, the
     conffile recorded in R's dpkg status, no unit enabled in R.
  5. R/usr/bin/tarn --version and `tarn check` on R/etc/tarn/station.json
     (the shared libraries are the build machine's: --force-depends).
  6. the installed man page renders without warnings and names every
     subcommand that `tarn help` lists.
  7. reinstall (the upgrade path) keeps an edited conffile; purge removes
     binary and config and keeps R/var/lib/tarn (station data).

Environment: TARN_SOURCE_DIR; TARN_PKG_BUILD_DIR reuses a build dir (else
/tmp/tarn-pkg-build-<uid>-<hash of the source path>, kept between runs so a rerun builds incrementally).
"""
import gzip
import hashlib
import os
import re
import shutil
import stat
import subprocess
import time

from harness import SOURCE_DIR, Harness, finish

# One cached build dir per source tree (a CMake cache belongs to one source dir).
BUILD = os.environ.get("TARN_PKG_BUILD_DIR", "/tmp/tarn-pkg-build-%d-%s" % (
    os.getuid(), hashlib.sha1(os.path.realpath(SOURCE_DIR).encode()).hexdigest()[:10]))
DEADLINE = time.monotonic() + 1140  # ctest gives 1200 s: a first Release build on 2 busy cores takes 7 min


def run(args, **kw):
    left = max(10, DEADLINE - time.monotonic())
    return subprocess.run(args, capture_output=True, text=True, timeout=left, **kw)


def project_version():
    text = open(os.path.join(SOURCE_DIR, "CMakeLists.txt")).read()
    return re.search(r"project\(tarn VERSION ([0-9.]+)", text).group(1)


def build_package(h):
    t0 = time.monotonic()
    r = run(["cmake", "-S", SOURCE_DIR, "-B", BUILD, "-DCMAKE_BUILD_TYPE=Release", "-DTARN_TESTS=OFF"])
    if not h.check(r.returncode == 0, "configure Release in %s" % BUILD):
        print(r.stdout[-2000:], r.stderr[-2000:])
        return None
    r = run(["cmake", "--build", BUILD, "-j2", "--target", "tarn"])
    if not h.check(r.returncode == 0, "build tarn (Release, -j2) in %.0f s" % (time.monotonic() - t0)):
        print(r.stdout[-3000:], r.stderr[-3000:])
        return None
    for old in os.listdir(BUILD):
        if old.endswith(".deb"):
            os.unlink(os.path.join(BUILD, old))
    r = run(["cpack", "-G", "DEB"], cwd=BUILD)
    debs = [f for f in os.listdir(BUILD) if f.endswith(".deb")]
    if not h.check(r.returncode == 0 and len(debs) == 1, "cpack -G DEB made one .deb: %s" % debs):
        print(r.stdout[-2000:], r.stderr[-2000:])
        return None
    print("package built in %.0f s: %s" % (time.monotonic() - t0, debs[0]))
    return os.path.join(BUILD, debs[0])


def control_field(info, name):
    m = re.search(r"^ %s: (.*)$" % name, info, flags=re.M)
    return m.group(1).strip() if m else None


def check_control(h, deb):
    info = run(["dpkg-deb", "-I", deb]).stdout
    arch = run(["dpkg", "--print-architecture"]).stdout.strip()
    h.check(control_field(info, "Package") == "tarn", "Package: tarn")
    h.check(control_field(info, "Version") == project_version() + "-1",
            "Version %s = project version %s + -1" % (control_field(info, "Version"), project_version()))
    h.check(control_field(info, "Architecture") == arch, "Architecture %s = dpkg's %s"
            % (control_field(info, "Architecture"), arch))
    depends = control_field(info, "Depends") or ""
    # What the binary links (daemon/CMakeLists.txt): these come only from dpkg-shlibdeps.
    for lib in ("libc6", "libstdc++6", "libsqlite3-0", "libsystemd0", "libpaho-mqttpp3", "libserialport0"):
        h.check(lib in depends, "Depends names %s (shlibdeps)" % lib)
    ctl = h.path("control")
    run(["dpkg-deb", "-e", deb, ctl])
    conffiles = open(os.path.join(ctl, "conffiles")).read().split() if os.path.exists(
        os.path.join(ctl, "conffiles")) else []
    h.check(conffiles == ["/etc/tarn/station.json"], "conffiles: %s" % conffiles)
    for s in ("postinst", "prerm", "postrm"):
        p = os.path.join(ctl, s)
        mode = stat.S_IMODE(os.stat(p).st_mode) if os.path.exists(p) else 0
        h.check(mode == 0o755, "%s in the control archive, mode %o" % (s, mode))
    # "Enables nothing by surprise": no command line of a script enables or starts the
    # unit (the postinst's message to the user is a here-document, skipped here).
    bad = []
    for s in ("postinst", "prerm", "postrm"):
        p = os.path.join(ctl, s)
        in_doc = False
        for line in open(p) if os.path.exists(p) else []:
            if in_doc:
                in_doc = line.strip() != "MSG"
                continue
            if "<<" in line:
                in_doc = True
            code = line.split("#", 1)[0]
            if re.search(r"systemctl\s+(\S+\s+)*(enable|start|restart|reenable|preset)\b", code) \
                    and "try-restart" not in code:
                bad.append("%s: %s" % (s, line.strip()))
    h.check(not bad, "no script enables/starts the unit: %s" % bad)


EXPECTED_FILES = [
    "./usr/bin/tarn",
    "./lib/systemd/system/tarn.service",
    "./usr/lib/sysusers.d/tarn.conf",
    "./usr/lib/tmpfiles.d/tarn.conf",
    "./etc/tarn/station.json",
    "./usr/share/doc/tarn/examples/single-fluorometer.json",
    "./usr/share/doc/tarn/examples/full-station.json",
    "./usr/share/doc/tarn/99-tarn-serial.rules",
    "./usr/share/doc/tarn/FIELD-GUIDE.md",
    "./usr/share/man/man1/tarn.1.gz",
]


def check_contents(h, deb):
    listing = run(["dpkg-deb", "-c", deb]).stdout
    print("package contents:\n" + listing)
    files = {l.split()[-1]: l.split()[0] for l in listing.splitlines() if l.strip()}
    for f in EXPECTED_FILES:
        h.check(f in files, "package holds %s" % f)
    h.check(files.get("./usr/bin/tarn", "").startswith("-rwxr-xr-x"), "/usr/bin/tarn is 0755")


def scratch_root(h):
    root = h.path("root")
    for d in ("var/lib/dpkg/info", "var/lib/dpkg/updates", "var/lib/dpkg/triggers", "etc"):
        os.makedirs(os.path.join(root, d), exist_ok=True)
    open(os.path.join(root, "var/lib/dpkg/status"), "w").close()
    # A root with the base system's users and groups (dialout among them), as on a board.
    for f in ("passwd", "group", "shadow", "gshadow"):
        if os.path.exists("/etc/" + f):
            shutil.copy("/etc/" + f, os.path.join(root, "etc", f))
    return root


def dpkg(root, *args):
    return run(["dpkg", "--root=" + root, "--force-script-chrootless", "--force-depends",
                "--log=/dev/null", *args])


def passwd_entry(root, name, file="passwd"):
    for line in open(os.path.join(root, "etc", file)):
        parts = line.rstrip("\n").split(":")
        if parts[0] == name:
            return parts
    return None


def check_install(h, deb, root):
    r = dpkg(root, "-i", deb)
    h.check(r.returncode == 0, "dpkg --root -i: exit %d" % r.returncode)
    print(r.stdout[-1500:])
    h.check("NOT enabled" in r.stdout, "postinst says the service is not enabled and how to enable it")
    user = passwd_entry(root, "tarn")
    h.check(user is not None and user[5] == "/var/lib/tarn", "postinst made user tarn (home %s)"
            % (user[5] if user else None))
    group = passwd_entry(root, "tarn", "group")
    dialout = passwd_entry(root, "dialout", "group")
    h.check(dialout is not None and "tarn" in dialout[3].split(","), "tarn is in dialout: %s" % dialout)
    state = os.path.join(root, "var/lib/tarn")
    st = os.stat(state) if os.path.isdir(state) else None
    h.check(st is not None and user is not None and st.st_uid == int(user[2])
            and stat.S_IMODE(st.st_mode) == 0o750, "/var/lib/tarn 0750 owned by tarn (tmpfiles)")
    cfg = os.path.join(root, "etc/tarn/station.json")
    st = os.stat(cfg)
    h.check(group is not None and st.st_gid == int(group[2]) and stat.S_IMODE(st.st_mode) == 0o640,
            "station.json 0640 group tarn (mode %o gid %d)" % (stat.S_IMODE(st.st_mode), st.st_gid))
    status = open(os.path.join(root, "var/lib/dpkg/status")).read()
    h.check(re.search(r"^Conffiles:\n /etc/tarn/station.json [0-9a-f]{32}$", status, flags=re.M)
            is not None, "dpkg records /etc/tarn/station.json as a conffile")
    wants = os.path.join(root, "etc/systemd/system/multi-user.target.wants/tarn.service")
    h.check(not os.path.lexists(wants), "no unit enabled in the root")
    listed = dpkg(root, "-L", "tarn").stdout.split()
    h.check("/usr/share/man/man1/tarn.1.gz" in listed and "/lib/systemd/system/tarn.service" in listed,
            "dpkg -L lists the man page and the unit")


def check_binary(h, root):
    tarn = os.path.join(root, "usr/bin/tarn")
    r = run([tarn, "--version"])
    h.check(r.returncode == 0 and r.stdout.strip() == "tarn " + project_version(),
            "installed tarn --version: %r" % r.stdout.strip())
    cfg = os.path.join(root, "etc/tarn/station.json")
    r = run([tarn, "check", "--config", cfg])
    h.check(r.returncode == 0 and "valid" in r.stdout, "installed tarn check on the shipped config: exit %d %s"
            % (r.returncode, ((r.stdout + r.stderr).strip().splitlines() or [""])[0][:300]))
    # The shipped config is the example from the source tree, byte for byte.
    same = open(cfg, "rb").read() == open(os.path.join(
        SOURCE_DIR, "config/examples/single-fluorometer.json"), "rb").read()
    h.check(same, "station.json is config/examples/single-fluorometer.json")
    # The unit starts what the package installed.
    unit = open(os.path.join(root, "lib/systemd/system/tarn.service")).read()
    h.check("ExecStart=/usr/bin/tarn run --config /etc/tarn/station.json" in unit,
            "unit runs /usr/bin/tarn with /etc/tarn/station.json")
    return tarn


def check_manpage(h, root, tarn):
    page = os.path.join(root, "usr/share/man/man1/tarn.1.gz")
    text = gzip.open(page, "rt").read()
    r = run(["man", "--warnings", "-l", page], env=dict(os.environ, MANWIDTH="80", LC_ALL="C.UTF-8"))
    h.check(r.returncode == 0 and not r.stderr.strip(), "man page renders without warnings: %s"
            % r.stderr.strip()[:300])
    names = re.findall(r"^  (\S+)\s", run([tarn, "help"]).stdout, flags=re.M)
    missing = [n for n in names if not re.search(r'^\.SS "tarn %s[ "]' % re.escape(n), text, flags=re.M)]
    h.check(len(names) >= 10 and not missing, "man page has a section for each of %d subcommands; missing %s"
            % (len(names), missing))


def check_upgrade_and_purge(h, deb, root):
    cfg = os.path.join(root, "etc/tarn/station.json")
    with open(cfg, "a") as f:
        f.write("\n// edited on site\n")
    r = dpkg(root, "-i", deb)
    h.check(r.returncode == 0, "reinstall over itself (upgrade path): exit %d" % r.returncode)
    h.check(open(cfg).read().endswith("// edited on site\n"), "edited conffile kept on reinstall")
    h.check("NOT enabled" not in r.stdout, "no first-install message on upgrade")
    r = dpkg(root, "--purge", "tarn")
    h.check(r.returncode == 0, "dpkg --purge: exit %d %s" % (r.returncode, r.stderr.strip()[-300:]))
    h.check(not os.path.exists(os.path.join(root, "usr/bin/tarn")), "purge removed /usr/bin/tarn")
    h.check(not os.path.exists(cfg), "purge removed the conffile")
    h.check(os.path.isdir(os.path.join(root, "var/lib/tarn")), "purge kept /var/lib/tarn (station data)")


with Harness("package") as h:
    for tool in ("cpack", "dpkg-deb", "dpkg-shlibdeps", "systemd-sysusers", "systemd-tmpfiles", "man"):
        h.check(shutil.which(tool) is not None, "%s available" % tool)
    deb = build_package(h) if not h.failures else None
    if deb:
        check_control(h, deb)
        check_contents(h, deb)
        root = scratch_root(h)
        check_install(h, deb, root)
        tarn = check_binary(h, root)
        check_manpage(h, root, tarn)
        check_upgrade_and_purge(h, deb, root)
    finish(h)
