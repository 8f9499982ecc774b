# .ci/deps.sh - make sure the Debian packages plyledger needs are installed.
# Sourced by tests/run and sample-fleet/run. Idempotent and quiet when all is
# present; installs what is missing with apt-get when run as root (or sudo).
#
#   pl_need_packages build        compiler, meson, libraries
#   pl_need_packages report       build + chromium (the sample fleet's report
#                                 as the browser draws it)
#   pl_need_packages test         build + cmocka, valgrind, sqlite3, the
#                                 Python reference libraries used by the tests,
#                                 chromium and html5lib for the report checks

PL_BUILD_PACKAGES="gcc libc6-dev pkg-config meson ninja-build python3 \
libsqlite3-dev libpng-dev zlib1g-dev libsodium-dev libcjson-dev libcsv-dev libkissfft-dev"
PL_TEST_PACKAGES="libcmocka-dev valgrind sqlite3 python3-numpy python3-scipy \
python3-skimage python3-png openssl xxd chromium python3-html5lib"
PL_REPORT_PACKAGES="chromium"

pl_need_packages() {
    _pkgs="$PL_BUILD_PACKAGES"
    [ "${1:-build}" = test ] && _pkgs="$_pkgs $PL_TEST_PACKAGES"
    [ "${1:-build}" = report ] && _pkgs="$_pkgs $PL_REPORT_PACKAGES"
    _missing=""
    for _p in $_pkgs; do
        _st=$(dpkg-query -W -f='${Status}' "$_p" 2>/dev/null || true)
        case "$_st" in
            *" installed") ;;
            *) _missing="$_missing $_p" ;;
        esac
    done
    [ -z "$_missing" ] && return 0
    echo "installing Debian packages:$_missing" >&2
    if [ "$(id -u)" -eq 0 ]; then
        _sudo=""
    elif command -v sudo >/dev/null 2>&1; then
        _sudo="sudo"
    else
        echo "error: missing packages:$_missing (run as root to install them)" >&2
        return 1
    fi
    export DEBIAN_FRONTEND=noninteractive
    $_sudo apt-get update -qq >/dev/null
    # shellcheck disable=SC2086
    $_sudo apt-get install -y -qq --no-install-recommends $_missing >/dev/null
}
