#!/bin/sh
# Cargo runner of the QEMU boards, and the one place in boards/ that holds their QEMU command
# lines: `qemu-run.sh [--plain | --print] <machine> <elf>`, where <machine> is lm3s6965evb, microbit,
# mps2-an386 or sifive_e. Every run has `timeout 60` in front, `-icount shift=0` (virtual time
# advances 1 ns per instruction) and semihosting routed to the host, and opens no display,
# monitor or serial port, so it also works with a closed stdin, as in CI.
#
# The script then shows the defmt frames QEMU writes to stdout:
# - when stdout is not a terminal, the raw frames pass through unchanged (for tools that decode);
# - when `defmt-print` is installed, the frames are decoded with the ELF's defmt table;
# - otherwise the frames are saved next to the ELF and the script says how to decode them.
# With `--plain` (the lean build, which prints text over semihosting) the output passes through.
# With `--print` the script prints the command, one argument a line, instead of running it (the
# host's tests compare it with the host's own table).
#
# The exit status is QEMU's (the firmware's exit code, or 124 when `timeout` fired).
set -u

plain=no
print=no
case ${1-} in
    --plain) plain=yes; shift ;;
    --print) print=yes; shift ;;
esac
if [ $# -ne 2 ]; then
    echo "usage: qemu-run.sh [--plain | --print] <machine> <elf>" >&2
    exit 2
fi
machine=$1
elf=$2

case $machine in
    lm3s6965evb) set -- qemu-system-arm -cpu cortex-m3 -machine lm3s6965evb ;;
    microbit) set -- qemu-system-arm -machine microbit ;;
    mps2-an386) set -- qemu-system-arm -machine mps2-an386 ;;
    sifive_e) set -- qemu-system-riscv32 -machine sifive_e -bios none ;;
    *)
        echo "qemu-run: unknown machine '$machine' (lm3s6965evb, microbit, mps2-an386, sifive_e)" >&2
        exit 2
        ;;
esac
set -- timeout 60 "$@" \
    -icount shift=0 \
    -semihosting-config enable=on,target=native \
    -display none -monitor none -serial null \
    -kernel "$elf"

if [ "$print" = yes ]; then
    printf '%s\n' "$@"
    exit 0
fi
if [ "$plain" = yes ] || [ ! -t 1 ]; then
    exec "$@"
fi

if command -v defmt-print >/dev/null 2>&1; then
    status_file=$(mktemp)
    { "$@"; echo $? >"$status_file"; } | defmt-print -e "$elf"
    status=$(cat "$status_file")
    rm -f "$status_file"
else
    frames="$elf.defmt"
    "$@" >"$frames"
    status=$?
    echo "qemu-run: $(wc -c <"$frames") bytes of defmt frames saved to $frames" >&2
    echo "qemu-run: to read them, install the decoder once with 'cargo install defmt-print --locked'" >&2
    echo "qemu-run: and run 'defmt-print -e $elf < $frames'" >&2
fi

case $status in
    0) ;;
    124) echo "qemu-run: timed out; the firmware did not exit" >&2 ;;
    *) echo "qemu-run: firmware exited with status $status" >&2 ;;
esac
exit "$status"
