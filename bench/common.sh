# Shared by the benchmark scripts (sourced, from the repository's root): builds the release
# binary, sets `bin` (HEXVIGIL=path runs another build) and `work` (a temporary directory
# removed on exit), and prints the machine and the binary.
bench_setup() {
    cargo build --release --bin hexvigil
    bin=$(realpath "${HEXVIGIL:-target/release/hexvigil}")
    work=$(mktemp -d)
    trap 'rm -rf "$work"' EXIT
    echo "machine: $(nproc) cores, $(free -g | awk '/Mem:/ {print $2}') GiB, $(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2 | sed 's/^ //'), $(uname -sr)"
    echo "binary: $bin ($(git rev-parse --short HEAD))"
}
