# Shared by the benchmark scripts (sourced, from the repository's root): builds the release
# binary, sets `bin` (HEXVIGIL=path runs another build) and `work` (a temporary directory
# removed on exit), and prints the machine and the binary; bench_inputs makes or links a
# scale's inputs.
bench_setup() {
    cargo build --release --bin hexvigil
    bin=$(realpath "${HEXVIGIL:-target/release/hexvigil}")
    work=$(mktemp -d)
    trap 'rm -rf "$work"' EXIT
    echo "machine: $(nproc) cores, $(free -g | awk '/Mem:/ {print $2}') GiB, $(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2 | sed 's/^ //'), $(uname -sr)"
    echo "binary: $bin ($(git rev-parse --short HEAD))"
}

# bench_inputs SCALE: the demo's inputs at intensity 6*SCALE in $work/xSCALE/input (linked
# from $INPUTS/xSCALE/input when given there; the generator is deterministic); sets `d` (the
# scale's directory), `diffs` (the diff files in order) and `elements` (their element changes).
bench_inputs() {
    local scale=$1
    d="$work/x$scale"
    if [ -n "${INPUTS:-}" ] && [ -d "$INPUTS/x$scale/input" ]; then
        mkdir -p "$d" && ln -s "$(realpath "$INPUTS/x$scale/input")" "$d/input"
    else
        "$bin" --quiet demo --out "$d" --intensity $((6 * scale)) --inputs-only
    fi
    mapfile -t diffs < <(find "$d/input/diffs" -name '*.osc.gz' | sort)
    elements=$(gzip -dc "${diffs[@]}" | grep -c -E '<(node|way|relation)[ >]')
}
