package benchfile

// Example is the commented bench file printed by "gliss bench example": the
// built-in simulated bench written as a bench file (driver "sim" for every
// role), followed, in comments, by the same roles on real instruments
// through the lineproto and scpi drivers. The numbers are those of the demo
// dot and demo stretcher (invented, PHYSICS.md).
const Example = `# gliss bench file: the instruments of one bench, their limits and the
# bench's calibration. Load it with "glissd --bench FILE"; check it with
# "gliss bench check FILE" (add --probe to open each instrument and read it).
#
# Software limits are a convenience, never a safety interlock: lasers used
# here are Class 3B/4 and stages can pinch.

bench: demo-sim                 # a name for this bench

calibration:
  # Grating stretcher: stage mm -> GDD ps^2 (Treacy 1969; Martinez 1987).
  stretcher:
    lines_per_mm: 1800
    wavelength_nm: 785
    littrow: true               # or incidence_deg: 40
    order: 1
    passes: 4
    lever: 2                    # mm of grating displacement per mm of stage
    zero_mm: 600                # stage position of zero dispersion
    sign: 1
  # Half-wave plate before a polariser: P = pmin + (pmax - pmin) cos^2(2(theta - theta0)).
  attenuator: {pmin_uw: 0.05, pmax_uw: 200, theta0_deg: 0}

instruments:
  # The simulated instruments share one optical state per "bench" id: the
  # stage moves the chirp that the counter sees. Same seed, same counts.
  - name: stage
    role: stage
    driver: sim
    limits: {min_mm: 0, max_mm: 1200, speed_mm_per_s: 25, accel_mm_per_s2: 50}
    settings: {bench: demo, seed: 1}
  - name: attenuator
    role: attenuator
    driver: sim
    limits: {min_deg: 0, max_deg: 360, speed_deg_per_s: 20, max_power_uw: 200}
    settings: {bench: demo, seed: 1}
  - name: powermeter
    role: powermeter
    driver: sim
    limits: {max_power_uw: 200}
    settings: {bench: demo, seed: 1}
  - name: laser
    role: laser
    driver: sim
    limits: {min_mev: -2, max_mev: 2, speed_mev_per_s: 2}
    settings: {bench: demo, seed: 1}
  - name: counter
    role: counter
    driver: sim
    limits: {max_rate_hz: {x: 2000000, xx: 2000000}}
    settings: {bench: demo, seed: 1}

# --- Real instruments -------------------------------------------------------
# Replace the entries above by entries like these. Name serial ports by their
# stable /dev/serial/by-id/ paths: a USB adapter that comes back after a
# disconnect may get another ttyUSB number. Commands and replies are
# templates and patterns: {value:%.4f} is the target in device units
# (physical x scale + offset), {axis} the axis name, {gate_ms} the gate.
# A reply pattern has a group (?P<value>...) (and optionally (?P<unit>...)).
#
# BEGIN REAL
#  - name: stage
#    role: stage
#    driver: lineproto
#    limits: {min_mm: 0, max_mm: 1200, speed_mm_per_s: 25, accel_mm_per_s2: 50}
#    settings:
#      transport:
#        serial: /dev/serial/by-id/usb-FTDI_FT232R_USB_UART_A100XYZ-if00-port0
#        baud: 115200
#        data_bits: 8
#        parity: none
#        stop_bits: 1
#        write_terminator: "\r\n"
#        read_terminator: "\n"
#        timeout: 500ms
#      axis: "1"                 # two axes of one controller share the port
#      scale: 1000               # controller steps per mm
#      tolerance: 0.002          # mm
#      retries: 3                # idempotent queries; backoff doubles
#      backoff: 50ms
#      ack: '^OK$'               # every set command is answered OK ...
#      error_reply: '^ERR'       # ... or ERR <reason>
#      identify: 'VER?'
#      commands:
#        move: '{axis}GO {value:%.0f}'
#        position: {send: '{axis}WHERE?', pattern: '^(?P<value>-?\d+)$'}
#        busy: {send: '{axis}STATE?', busy: '^RUN$', ready: '^IDLE$'}
#        home: '{axis}REF'
#  - name: powermeter
#    role: powermeter
#    driver: scpi                # *IDN? at connect, *CLS, SYST:ERR? after commands
#    limits: {max_power_uw: 200}
#    settings:
#      transport: {tcp: "192.0.2.20:5025", timeout: 2s}
#      commands:
#        read: {send: 'MEAS:POW?', unit: W}   # "1.234E-05" W, converted to uW
#  - name: counter
#    role: counter
#    driver: lineproto
#    limits: {max_rate_hz: {x: 2000000, xx: 2000000}}
#    settings:
#      transport: {serial: /dev/serial/by-id/usb-gliss-counter-if00, baud: 921600}
#      channels: [x, xx]
#      commands:
#        count: {send: 'ACQ {gate_ms:%d}', pattern: '^(?P<x>\d+),(?P<xx>\d+)$'}
# END REAL
`
