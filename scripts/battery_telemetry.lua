-- Read the greenhouse node's battery gauge over SMBus with PEC: every
-- reply's PEC is checked and marked on its frame.
--   Safety: a gauge guards cells that can burn. This script only reads,
--   except the alarm threshold, which it writes back unchanged.

local GAUGE = 0x0B
smbus.use_pec(true)

step("telemetry")
local mv = smbus.read_word(GAUGE, 0x01)
local ma = signed(smbus.read_word(GAUGE, 0x02))
local kelvin10 = smbus.read_word(GAUGE, 0x03)
local pct = smbus.read_byte(GAUGE, 0x04)
local cycles = smbus.read_word(GAUGE, 0x05)
local status = smbus.read_word(GAUGE, 0x06)
check_range(mv, 9900, 12600, "pack voltage (mV), three cells")
check_range(pct, 0, 100, "state of charge (%)")
check(status & 0x8000 ~= 0, "the gauge appends PEC")
log(string.format("pack %.3f V, %d mA, %.1f degC, %d %%, %d cycles, status %s",
  mv / 1000, ma, kelvin10 / 10 - 273.15, pct, cycles, hex(status)))

step("identity and cells")
local name = smbus.block_read(GAUGE, 0x30)
log("pack name: " .. string.char(table.unpack(name)))
for cell = 0, 2 do
  log(string.format("cell %d: %d mV", cell, smbus.process_call(GAUGE, 0x40, cell)))
end
local history = smbus.block_process_call(GAUGE, 0x41, { 0, 4 })
check_eq(#history, 4, "four hours of charge history")

step("alarm threshold")
local alarm = smbus.read_byte(GAUGE, 0x10)
smbus.write_byte(GAUGE, 0x10, alarm)
check_eq(smbus.read_byte(GAUGE, 0x10), alarm, "alarm threshold unchanged")

step("decoded by the gauge's map")
-- The same values through the register helper and scripts/maps/battery_gauge.lua
-- (plain reads, no PEC): the map turns them into units and names.
local gauge = bus.device(GAUGE, { width = 16, order = "little", map = require("maps.battery_gauge") })
local celsius = gauge:read("CELL_TEMP")
check(math.abs(celsius - (kelvin10 / 10 - 273.15)) < 1, "the map's Celsius matches the arithmetic above")
for line in gauge:explain("STATUS"):gmatch("[^\n]+") do log(line) end
