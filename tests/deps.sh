# Debian packages bandlink needs to build, test and run its demo. Sourced by tests/run and demo/run.
BL_PACKAGES="meson ninja-build pkg-config gcc libgsl-dev liblapacke-dev libopenblas-dev libsndfile1-dev
libcjson-dev libhdf5-dev python3 python3-numpy python3-scipy python3-mpmath python3-soundfile
python3-mne python3-h5py"

# Install what is missing: as root with apt-get; otherwise print the command to run.
bl_install_missing() {
    local missing=()
    for p in $BL_PACKAGES "$@"; do
        dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "ok installed" || missing+=("$p")
    done
    [ ${#missing[@]} -eq 0 ] && return 0
    if [ "$(id -u)" -eq 0 ] && command -v apt-get >/dev/null; then
        echo "installing: ${missing[*]}" >&2
        apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq "${missing[@]}" >&2 || return 1
    else
        echo "missing Debian packages; run: sudo apt-get update && sudo apt-get install -y ${missing[*]}" >&2
        return 1
    fi
}
