-- Register map and behaviour of the greenhouse air monitor (our fictional
-- part): a CO2 reading on demand with a data-ready bit, a four-deep FIFO
-- of past readings, and a signed drift reading. 8-bit pointer, 16-bit
-- big-endian registers. The demo bench simulates the part from this file
-- (model = "mapped"); scripts read it with
--   bus.device(0x3A, { width = 16, map = require("maps.air_monitor") }).
-- The hooks below are the part's behaviour; a script reading the map
-- ignores them.

-- The sensor's code to ppm is not a straight line (our part's own curve):
-- 400 ppm at code 0, then 0.25 ppm a code plus a square term.
local function ppm(raw) return 400 + raw * 0.25 + raw * raw / 65536 end

local map = {
  ID      = { at = 0x00, width = 16, access = "ro", reset = 0xA1C0, doc = "reads 0xA1C0" },
  CONTROL = { at = 0x01, width = 16, reset = 0x0000, fields = {
              START = { bit = 0, doc = "write 1: measure once; reads 0 again when done" },
              MODE  = { lsb = 1, width = 2, doc = "measuring time",
                        values = { quick = 0, normal = 1, fine = 2 } },
            } },
  STATUS  = { at = 0x02, width = 16, access = "volatile", reset = 0x0000, fields = {
              DRDY  = { bit = 0, access = "ro", doc = "a reading is ready; reading CO2 clears it" },
              BUSY  = { bit = 1, access = "ro" },
              DEPTH = { lsb = 4, width = 3, access = "ro", doc = "readings waiting in FIFO" },
              OVER  = { bit = 7, access = "w1c", doc = "the FIFO lost a reading; write 1 to clear" },
            } },
  CO2     = { at = 0x03, width = 16, access = "volatile", scale = ppm, unit = "ppm" },
  FIFO    = { at = 0x04, width = 16, access = "volatile", scale = ppm, unit = "ppm",
              doc = "the oldest reading; each read takes one out (0 when empty)" },
  DRIFT   = { at = 0x05, width = 16, access = "volatile", signed = true, scale = 0.1, unit = "ppm/h" },
}

-- Milliseconds a measurement takes in each MODE.
local measuring = { [0] = 4, [1] = 8, [2] = 16 }
local fifo = {}

-- The air itself: CO2 swings slowly with the bus clock (t in ms).
local function code_at(t) return 1024 + math.floor(512 * math.sin(t / 60000)) end

function map.on_write(dev, reg, value, t)
  if reg ~= "CONTROL" or value & 1 == 0 or dev:get("STATUS.BUSY") == 1 then return end
  dev:put("STATUS.BUSY", 1)
  dev:put("STATUS.DRDY", 0)
  dev:after(measuring[(value >> 1) & 3] or 8, function(dev, t)
    local raw = code_at(t)
    dev:put("CO2", raw)
    if #fifo == 4 then
      table.remove(fifo, 1)
      dev:put("STATUS.OVER", 1)
    end
    fifo[#fifo + 1] = raw
    dev:put("STATUS.DEPTH", #fifo)
    dev:put("STATUS.BUSY", 0)
    dev:put("STATUS.DRDY", 1)
    dev:put("CONTROL.START", 0)
  end)
end

function map.on_read(dev, reg, t)
  if reg == "CO2" then
    dev:put("STATUS.DRDY", 0)
  elseif reg == "FIFO" then
    local raw = table.remove(fifo, 1) or 0
    dev:put("STATUS.DEPTH", #fifo)
    return raw
  elseif reg == "DRIFT" then
    -- A signed reading from a signal: +-2.5 ppm/h over ten seconds, as
    -- 16-bit two's complement in 0.1 ppm/h.
    return math.floor(25 * math.sin(t / 10000 * 2 * math.pi) + 0.5) & 0xFFFF
  end
end

return map
