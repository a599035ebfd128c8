#!/bin/sh
# Cargo runner front for the QEMU boards: runs the QEMU command line given as arguments (the last
# argument is the firmware ELF) and shows the defmt frames QEMU writes to stdout.
#
# - When stdout is not a terminal, the raw frames pass through unchanged (for tools that decode).
# - When `defmt-print` is installed, the frames are decoded with the ELF's defmt table.
# - Otherwise the frames are saved next to the ELF and the script says how to decode them.
#
# The exit status is QEMU's (the firmware's exit code, or 124 when `timeout` fired).
set -u

for last in "$@"; do :; done
elf=$last

if [ ! -t 1 ]; then
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
