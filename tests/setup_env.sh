# Shared set-up for tests/run.sh and demo/run.sh (sourced, POSIX sh).
# Creates .venv if absent, makes sure WeasyPrint's system libraries are there (installing
# them with apt when running as root), and installs the package with the given extras.
# Usage: . tests/setup_env.sh EXTRAS   (EXTRAS like "test" or "" for none)

AXL_ROOT=$(pwd)
AXL_VENV="$AXL_ROOT/.venv"
AXL_PY="$AXL_VENV/bin/python"
AXL_DEBIAN_PACKAGES="libpango-1.0-0 libpangoft2-1.0-0 libharfbuzz0b libharfbuzz-subset0 libfontconfig1 fonts-dejavu-core"

axl_have_lib() {
    python3 -c "import ctypes.util, sys; sys.exit(0 if ctypes.util.find_library('$1') else 1)" 2>/dev/null
}

axl_apt_install() {
    if [ "$(id -u)" = "0" ] && command -v apt-get >/dev/null 2>&1; then
        echo "axisledger set-up: installing Debian packages: $*" >&2
        DEBIAN_FRONTEND=noninteractive apt-get update -qq >&2 &&
        DEBIAN_FRONTEND=noninteractive apt-get install -y -qq "$@" >&2
    else
        return 1
    fi
}

axl_system_libraries() {
    if axl_have_lib pango-1.0 && axl_have_lib pangoft2-1.0 && axl_have_lib harfbuzz && axl_have_lib harfbuzz-subset && fc-list 2>/dev/null | grep -qi dejavu; then
        return 0
    fi
    if ! axl_apt_install $AXL_DEBIAN_PACKAGES; then
        echo "axisledger set-up: WeasyPrint needs Pango, HarfBuzz and a font; install the Debian packages:" >&2
        echo "  sudo apt-get install $AXL_DEBIAN_PACKAGES" >&2
        return 1
    fi
}

axl_venv() {
    if [ ! -x "$AXL_PY" ]; then
        echo "axisledger set-up: creating $AXL_VENV" >&2
        if ! python3 -m venv "$AXL_VENV" 2>/dev/null; then
            rm -rf "$AXL_VENV"
            axl_apt_install python3-venv || {
                echo "axisledger set-up: python3 -m venv failed; install the Debian package python3-venv" >&2
                return 1
            }
            python3 -m venv "$AXL_VENV" || return 1
        fi
    fi
}

axl_install() {
    extras=$1
    spec="."
    [ -n "$extras" ] && spec=".[$extras]"
    stamp="$AXL_VENV/.axisledger-installed"
    want="$(cat pyproject.toml | "$AXL_PY" -c 'import hashlib,sys; print(hashlib.sha256(sys.stdin.buffer.read()).hexdigest())') $extras"
    if [ -f "$stamp" ] && grep -qxF "$want" "$stamp"; then
        return 0
    fi
    echo "axisledger set-up: installing axisledger${extras:+ with [$extras]} into .venv" >&2
    "$AXL_PY" -m pip install -q --disable-pip-version-check --upgrade pip >&2 || return 1
    "$AXL_PY" -m pip install -q --disable-pip-version-check -e "$spec" >&2 || return 1
    echo "$want" >> "$stamp"
}

axl_setup() {
    axl_system_libraries && axl_venv && axl_install "$1"
}
