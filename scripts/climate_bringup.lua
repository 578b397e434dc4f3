-- Bring-up of the greenhouse node's climate sensors: identify, configure,
-- convert, wait for data-ready, read and convert the signed results.
--   buscue run scripts/climate_bringup.lua --set samples=5 --set averaging=3

local map = require("maps.climate")
local canopy = bus.device(0x31, { width = 16, map = map })
local outdoor = bus.device(0x35, { width = 16, map = map })

step("identify")
check_eq(canopy:get("ID"), 0x5E11, "canopy sensor ID")
check_eq(outdoor:get("ID"), 0x5E11, "outdoor sensor ID")

step("configure")
local averaging = param("averaging", 1)       -- 0..3: 2, 4, 8, 16 ms conversions
canopy:set_field("CONTROL.AVG", averaging)
canopy:set("TEMP_HIGH", 35 * 100)             -- alert above 35 degC
check_eq(canopy:field("CONTROL.AVG"), averaging, "CONTROL.AVG read back")

step("measure canopy")
for i = 1, param("samples", 3) do
  canopy:set_field("CONTROL.START", 1)
  canopy:wait("STATUS", 0x0001, 0x0001, { timeout_ms = 40 })   -- poll DRDY
  local t = signed(canopy:get("TEMPERATURE")) / 100
  local h = canopy:get("HUMIDITY") / 100
  check_range(t, -40, 85, "canopy temperature (degC)")
  check_range(h, 0, 100, "canopy humidity (%RH)")
  log(string.format("canopy sample %d: %.2f degC, %.2f %%RH", i, t, h))
  sleep_ms(param("interval_ms", 1000))
end

step("measure outdoor")
-- The outdoor probe NACKs its address while it converts: ACK polling
-- tells when the result is ready.
outdoor:set("CONTROL", 0x0001)
local waited = bus.wait_ack(0x35, { timeout_ms = 20 })
local raw = outdoor:get("TEMPERATURE")
local t = signed(raw) / 100
check(t < 0, "a winter night should read below zero")
log(string.format("outdoor: %.2f degC (raw %s) after %.1f ms", t, hex(raw), waited))

step("clock stretching")
-- Reading a result before the conversion ends: the sensor holds SCL low
-- until it is ready, and the frame's bus time shows the stretch.
canopy:set("CONTROL", 0x0007)                 -- AVG=3 (16 ms), START
local stretched = canopy:get("TEMPERATURE")
log(string.format("stretched read: %.2f degC", signed(stretched) / 100))
