-- Run inside the test guest against the kernel's SMBus stub (i2c-stub,
-- loaded with chips at 0x31 and 0x35, every function it has): each SMBus
-- protocol the stub carries, its answer checked; an absent address; shapes
-- an SMBus-only bus cannot carry, refused before they reach it.
local A, B = 0x31, 0x35

local info = bus.adapter()
check(info.smbus_only, "the stub speaks only SMBus: " .. info.description)
log("adapter: " .. info.driver .. " " .. info.target)

smbus.quick(A)

smbus.write_byte(A, 0x10, 0x5A)
check(smbus.read_byte(A, 0x10) == 0x5A, "Read Byte reads what Write Byte wrote")

smbus.write_word(A, 0x20, 0xBEEF)
check(smbus.read_word(A, 0x20) == 0xBEEF, "Read Word reads what Write Word wrote")

-- Send Byte sets the stub's register pointer; Receive Byte reads there.
smbus.send_byte(A, 0x10)
check(smbus.receive_byte(A) == 0x5A, "Receive Byte reads at the pointer Send Byte set")

-- A command and several bytes: I2C block write and read.
bus.write(A, { 0x40, 0x01, 0x02, 0x03 })
local r = bus.write_read(A, { 0x40 }, 3)
check(#r == 3 and r[1] == 0x01 and r[2] == 0x02 and r[3] == 0x03, "I2C block read reads the block written")

smbus.block_write(B, 0x50, { 0x09, 0x08, 0x07 })
local blk = smbus.block_read(B, 0x50)
check(#blk == 3 and blk[1] == 0x09 and blk[3] == 0x07, "Block Read reads the block Block Write wrote")

local ok, e = pcall(smbus.read_byte, 0x36, 0x00)
check(not ok and e.kind == "address-nack", "an absent address is an address NACK: " .. tostring(e))

ok, e = pcall(bus.transfer, A, { { read = 1 }, { write = { 0x01 } }, { read = 1 } })
check(not ok and e.kind == "adapter" and e.message:find("speaks only SMBus", 1, true),
  "a read-write-read is refused: " .. tostring(e))

ok, e = pcall(smbus.process_call, A, 0x01, 0x1234)
check(not ok and e.message:find("Process Call", 1, true), "a Process Call the stub lacks is refused: " .. tostring(e))

log("kernel guest: every protocol checked")
