#!/usr/bin/env bash
# The portable-numerics promise on a second architecture: builds tabcard for aarch64 (the Rust
# target's standard library from rustup, the cross linker and qemu-user from Debian), then runs,
# under user-mode emulation, the matrix-kernel unit tests at the scalar and NEON levels and the
# golden-digest test, which must reproduce the committed x86-64 digests bit for bit
# (tests/golden/portable-v1.json). Skips with a message, and exit status 0, when the target, the
# cross tools or binfmt registration cannot be had on this machine; a failed test fails the script.
#
#   bash tests/aarch64/run.sh
set -euo pipefail
cd "$(dirname "$0")/../.."
target=aarch64-unknown-linux-gnu

skip() { echo "aarch64 check skipped: $*"; exit 0; }

if ! rustup target list --installed 2>/dev/null | grep -qx "$target"; then
  timeout 600 rustup target add "$target" >/dev/null 2>&1 || skip "rustup could not install the $target standard library"
fi
if ! command -v aarch64-linux-gnu-gcc >/dev/null || [[ ! -e /usr/libexec/qemu-binfmt/aarch64-binfmt-P ]]; then
  command -v apt-get >/dev/null && [[ $(id -u) -eq 0 ]] || skip "no apt-get as root to install the cross linker and qemu-user"
  (apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq \
     gcc-aarch64-linux-gnu libc6-dev-arm64-cross qemu-user qemu-user-binfmt) >/dev/null 2>&1 \
    || skip "apt-get could not install gcc-aarch64-linux-gnu, qemu-user and qemu-user-binfmt"
fi
# The tests start the tabcard binary themselves, so aarch64 executables must run directly:
# register qemu with the kernel's binfmt_misc (root only).
binfmt=/proc/sys/fs/binfmt_misc
if [[ ! -e $binfmt/qemu-aarch64 ]]; then
  [[ -e $binfmt/register ]] || mount -t binfmt_misc binfmt_misc "$binfmt" 2>/dev/null || skip "cannot mount binfmt_misc"
  cat /usr/lib/binfmt.d/qemu-aarch64.conf > "$binfmt/register" 2>/dev/null || skip "cannot register qemu-aarch64 with binfmt_misc"
fi

export CARGO_TARGET_AARCH64_UNKNOWN_LINUX_GNU_LINKER=aarch64-linux-gnu-gcc
export QEMU_LD_PREFIX=/usr/aarch64-linux-gnu
echo "== aarch64 under qemu-user: matrix kernels at every level against the reference"
cargo test --release --target "$target" --lib nn::
echo "== aarch64 under qemu-user: golden digests of the small experiment (scalar and neon levels)"
cargo test --release --target "$target" --test portable_numerics -- golden an_unusable
