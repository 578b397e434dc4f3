#!/usr/bin/env bash
# Builds what the kernel-adapter test boots: a Linux kernel with its
# i2c-dev and i2c-stub modules, QEMU, a static busybox (all unpacked from
# the system's package archive, nothing installed), a statically linked
# buscue, and an initramfs holding them with the guest's cases
# (tests/kernel/guest/). Downloads are kept under target/kernel-kit, so a
# second run only rebuilds buscue and the initramfs.
#
#   bash tests/kernel/kit.sh          # then: cargo test --test kernel -- --ignored
#
# Fails loudly (non-zero exit) when anything cannot be had: the test that
# needs the kit must not pass without it.
set -euo pipefail
cd "$(dirname "$0")/../.."
KIT=${BUSCUE_KERNEL_KIT:-$PWD/target/kernel-kit}
mkdir -p "$KIT/debs"

# What installing the kernel image, busybox-static and QEMU for x86 would
# add to this machine: the packages to unpack. QEMU is unpacked, not
# installed: installing it could replace the machine's own qemu-utils with
# another release.
packages() {
  local image
  image=$(apt-cache depends linux-image-amd64 2>/dev/null | awk '/Depends: linux-image-/ {print $2; exit}')
  [ -n "$image" ] || { echo "kit: no linux-image-amd64 in the package lists" >&2; return 1; }
  apt-get install -s --no-install-recommends "$image" busybox-static qemu-system-x86 2>/dev/null \
    | awk '/^Inst / {print $2}' | grep . || { echo "kit: apt-get could not plan the packages" >&2; return 1; }
}

if [ ! -f "$KIT/unpacked" ]; then
  if ! list=$(packages); then
    apt-get update -qq
    list=$(packages)
  fi
  (cd "$KIT/debs" && apt-get download $list >/dev/null 2>"$KIT/download.log") || {
    apt-get update -qq
    (cd "$KIT/debs" && apt-get download $list >/dev/null 2>>"$KIT/download.log")
  }
  rm -rf "$KIT/root"
  mkdir -p "$KIT/root"
  for d in "$KIT"/debs/*.deb; do dpkg-deb -x "$d" "$KIT/root"; done
  touch "$KIT/unpacked"
fi

R=$KIT/root
for f in "$R"/boot/vmlinuz-* "$R"/bin/busybox "$R"/usr/bin/qemu-system-x86_64; do
  [ -e "$f" ] || { echo "kit: $f is missing after unpacking" >&2; exit 1; }
done
modules=$(ls -d "$R"/lib/modules/*/kernel/drivers/i2c)
for m in i2c-dev.ko i2c-stub.ko; do
  [ -f "$modules/$m" ] || { echo "kit: the kernel package has no $m" >&2; exit 1; }
done

# A binary that runs in a guest with no C library: static, for the host's
# own target triple (so build scripts stay dynamic), in its own profile.
RUSTFLAGS="-C target-feature=+crt-static" cargo build --quiet --profile guest \
  --target x86_64-unknown-linux-gnu --bin buscue
bin=target/x86_64-unknown-linux-gnu/guest/buscue

rm -rf "$KIT/initrd"
mkdir -p "$KIT/initrd"/{bin,mod,guest,proc,sys,dev,tmp}
cp "$R/bin/busybox" "$KIT/initrd/bin/"
cp "$bin" "$KIT/initrd/bin/buscue"
cp "$modules/i2c-dev.ko" "$modules/i2c-stub.ko" "$KIT/initrd/mod/"
cp tests/kernel/guest/*.lua tests/kernel/guest/*.toml "$KIT/initrd/guest/"
install -m 755 tests/kernel/guest/init "$KIT/initrd/init"
# newc cpio by the kit's own busybox (the host may have no cpio).
(cd "$KIT/initrd" && find . | "$R/bin/busybox" cpio -o -H newc 2>/dev/null | gzip -1 >"$KIT/initrd.gz")
ls "$R"/boot/vmlinuz-* | head -1 >"$KIT/kernel-path"
echo "kit ready: $KIT"
