//! How long a framed serial link waits for a reply before it sends a
//! request again, learned from the link, and how large the frames it sends
//! may be.
//!
//! Contract:
//! - [`RetransmitTimer`] follows RFC 6298 ("Computing TCP's Retransmission
//!   Timer") section 2: the first sample R sets SRTT = R and
//!   RTTVAR = R/2; each later one sets RTTVAR = (1 - 1/4)·RTTVAR +
//!   1/4·|SRTT - R|, then SRTT = (1 - 1/8)·SRTT + 1/8·R; and
//!   RTO = SRTT + max(G, 4·RTTVAR). The clock granularity G is the
//!   floor below: a serial link has no coarse timer tick, but a host
//!   thread wakes up late by a millisecond or so.
//! - The RTO never falls below the floor nor rises above the ceiling (the
//!   user's `timeout_ms`): the ceiling bounds the first try of a request.
//!   Before the first sample the RTO is the ceiling (RFC 6298 §2.1 says
//!   1 s for TCP; a serial adapter answers far sooner).
//! - Karn's rule (RFC 6298 §3) is the caller's: only a reply to a request
//!   sent once is a sample.
//! - [`RetransmitTimer::backed_off`] doubles per expiry (§5.5) up to
//!   [`MAX_BACKOFF`]; a new sample ends the backoff (§5.7).
//! - Frame length: on a slow UART the round trip grows with the bytes a
//!   request waits behind. A sample may carry its byte count x
//!   ([`RetransmitTimer::sample_sized`]); the timer fits R = F + b·x (an
//!   exponentially weighted least-squares slope b, weight 1/8, never
//!   negative) and runs the RFC 6298 formulas above on the fixed part
//!   F = R − b·x. The RTO of a request of x bytes is the fixed-part RTO
//!   (floor and ceiling apply to it) plus b·x. With x = 0 throughout this
//!   is RFC 6298 exactly.
//! - [`RetransmitTimer::probe_sized`] is the wait before the first resend
//!   of a request nothing else would reveal lost: twice SRTT plus its
//!   wire time, between the floor and the RTO (RFC 8985 §7.2).
//! - [`FrameSizer`] sizes batches to the loss. It starts at one and may
//!   grow by one per clean reply (slow start, as TCP's: a lossy link never
//!   gets a frame too long to get through, which matters because a request
//!   the adapter has run cannot be split, and its reply must cross whole).
//!   It learns the loss per wire byte λ from the share of tries answered
//!   (a frame of L bytes crosses both ways with probability e^(−λ·L)),
//!   and picks the size b that moves the most transactions per unit of
//!   time, b·e^(−λ·L(b)) / (t0 + L(b)·τ). On a clean link that is the
//!   largest size the slow start has reached; under loss it is the
//!   size where a longer frame would lose more than it carries. This
//!   replaces the halving of congestion control (AIMD): loss on a serial
//!   line is noise that does not fall when the sender slows down, and
//!   halving per loss event kept the batch at one at 1 % flips, where four
//!   or so carry twice as much per try.

use std::time::Duration;

/// Lowest RTO: a pseudo-terminal answers in 0.1-0.3 ms. A thread that
/// wakes up late makes the timer fire late, not early, and a spurious
/// resend costs one repeat answered from the adapter's cache; a higher
/// floor costs the floor per lost frame that no later reply reveals
/// (measured, dev bench at 1 % flipped: 1.5k tx/s at 2 ms, 2.7k at 1 ms).
pub const RTO_FLOOR: Duration = Duration::from_micros(250);

/// Most doublings of the RTO while a request goes unanswered: twice the
/// RTO, and never more than [`MAX_BACKED_OFF`]. Far lower than TCP's:
/// loss on a serial line is noise, not congestion, so a longer wait only
/// delays the next try; one doubling still lets a timer set too short
/// (every reply then follows a resend, so Karn's rule takes no sample)
/// reach the true round trip.
pub const MAX_BACKOFF: u32 = 1;

/// Longest wait for one try, however far the timer has backed off.
pub const MAX_BACKED_OFF: Duration = Duration::from_secs(2);

/// The smoothed round-trip estimate of one link.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RetransmitTimer {
    srtt: Option<Duration>,
    rttvar: Duration,
    rto: Duration,
    floor: Duration,
    ceiling: Duration,
    fit: ByteFit,
    /// Time per byte (ns) assumed until the samples teach one.
    prior_ns_per_byte: f64,
}

/// Exponentially weighted least squares of round trip (ns) on bytes.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
struct ByteFit {
    samples: u32,
    mean_x: f64,
    mean_y: f64,
    var_x: f64,
    cov_xy: f64,
}

/// Weight of a new sample in [`ByteFit`], the same 1/8 as SRTT's.
const FIT_WEIGHT: f64 = 1.0 / 8.0;

/// Longest believable time per byte: 10 ms, a 1,000-baud line.
const MAX_NS_PER_BYTE: f64 = 10_000_000.0;

impl ByteFit {
    fn add(&mut self, x: f64, y: f64) {
        if self.samples == 0 {
            (self.mean_x, self.mean_y) = (x, y);
        } else {
            // West's weighted incremental mean and (co)variance.
            let (dx, dy) = (x - self.mean_x, y - self.mean_y);
            self.mean_x += FIT_WEIGHT * dx;
            self.mean_y += FIT_WEIGHT * dy;
            self.var_x = (1.0 - FIT_WEIGHT) * (self.var_x + FIT_WEIGHT * dx * dx);
            self.cov_xy = (1.0 - FIT_WEIGHT) * (self.cov_xy + FIT_WEIGHT * dx * dy);
        }
        self.samples = self.samples.saturating_add(1);
    }

    /// Nanoseconds per byte: the fitted slope once the samples differ in
    /// length by a few bytes (a slope from equal lengths is noise); before
    /// that `prior`, but never more than the mean sample over the mean
    /// length: a round trip is at least its bytes' wire time, so that
    /// undoes a prior from a baud rate a pseudo-terminal ignores.
    fn ns_per_byte(&self, prior: f64) -> f64 {
        let slope = if self.var_x >= 4.0 {
            self.cov_xy / self.var_x
        } else if self.samples > 0 && self.mean_x >= 1.0 {
            prior.min(self.mean_y / self.mean_x)
        } else {
            prior
        };
        // Twice the prior at most: a line is not slower than its baud
        // rate says, and under loss the samples of a lone request that
        // waited for a repair before it would teach a slope a pty never
        // had (measured: 40 ms timers on a 0.2 ms link at 5 % loss).
        let cap = if prior > 0.0 { 2.0 * prior } else { MAX_NS_PER_BYTE };
        slope.clamp(0.0, cap.min(MAX_NS_PER_BYTE))
    }
}

impl RetransmitTimer {
    /// A timer with no sample yet: its RTO is the ceiling.
    pub fn new(floor: Duration, ceiling: Duration) -> Self {
        let ceiling = ceiling.max(floor);
        RetransmitTimer {
            srtt: None,
            rttvar: Duration::ZERO,
            rto: ceiling,
            floor,
            ceiling,
            fit: ByteFit::default(),
            prior_ns_per_byte: 0.0,
        }
    }

    /// Assumes `per_byte` on the wire until samples of different lengths
    /// teach the real figure: the configured baud rate's byte time, so
    /// the first long frames on a slow UART are not resent before they
    /// could have crossed (which Karn's rule would then never correct).
    pub fn assuming_byte_time(mut self, per_byte: Duration) -> Self {
        self.prior_ns_per_byte = (per_byte.as_nanos() as f64).min(MAX_NS_PER_BYTE);
        self
    }

    /// Takes one round-trip sample (a reply to a request sent once) of a
    /// request that waited behind `bytes` bytes on the wire, its own
    /// included.
    pub fn sample_sized(&mut self, r: Duration, bytes: usize) {
        self.fit.add(bytes as f64, r.as_nanos() as f64);
        self.sample(r.saturating_sub(self.byte_time(bytes)));
    }

    /// The learned wire time of `bytes` bytes.
    pub fn byte_time(&self, bytes: usize) -> Duration {
        Duration::from_nanos((self.fit.ns_per_byte(self.prior_ns_per_byte) * bytes as f64) as u64)
    }

    /// The learned time per byte on the wire.
    pub fn per_byte(&self) -> Duration {
        self.byte_time(1000) / 1000
    }

    /// Takes one round-trip sample of the fixed part (no byte count).
    pub fn sample(&mut self, r: Duration) {
        match self.srtt {
            None => {
                self.srtt = Some(r);
                self.rttvar = r / 2;
            }
            Some(srtt) => {
                let err = srtt.abs_diff(r);
                self.rttvar = self.rttvar * 3 / 4 + err / 4;
                self.srtt = Some(srtt * 7 / 8 + r / 8);
            }
        }
        let srtt = self.srtt.unwrap_or(r);
        self.rto = (srtt + (4 * self.rttvar).max(self.floor)).clamp(self.floor, self.ceiling);
    }

    /// The RTO for a request's first try.
    pub fn rto(&self) -> Duration {
        self.rto
    }

    /// The smoothed round trip, once there is a sample.
    pub fn srtt(&self) -> Option<Duration> {
        self.srtt
    }

    /// The wait for a request that has timed out `expiries` times.
    pub fn backed_off(&self, expiries: u32) -> Duration {
        self.backed_off_sized(expiries, 0)
    }

    /// The RTO of a request that waits behind `bytes` bytes.
    pub fn rto_sized(&self, bytes: usize) -> Duration {
        // A quarter more than the fitted wire time: the fit lags a line
        // whose load just grew, and RTTVAR measures the fixed part only.
        self.rto + self.byte_time(bytes) * 5 / 4
    }

    /// The wait before the first resend of a request the pipeline waits
    /// for, after which nothing else would reveal its loss (a tail loss):
    /// twice the smoothed round trip, plus the bytes' wire time, never
    /// below the floor nor above the RTO (the probe timeout of RFC 8985
    /// §7.2, "The RACK-TLP Loss Detection Algorithm for TCP"). The RTO
    /// covers the round trip's variance, which on a busy host is mostly
    /// the host waking late, and a needless probe costs one repeat the
    /// adapter answers from its cache; the RTO (and its backoff) times the
    /// tries after it. Before any sample, the RTO.
    pub fn probe_sized(&self, bytes: usize) -> Duration {
        let Some(srtt) = self.srtt else { return self.rto_sized(bytes) };
        ((2 * srtt).max(self.floor) + self.byte_time(bytes) * 5 / 4).min(self.rto_sized(bytes))
    }

    /// [`Self::backed_off`] for a request that waits behind `bytes` bytes:
    /// the caps apply to the fixed part, the bytes' wire time is added.
    pub fn backed_off_sized(&self, expiries: u32, bytes: usize) -> Duration {
        let doubled = self.rto_sized(bytes).saturating_mul(1 << expiries.min(MAX_BACKOFF));
        doubled.min(MAX_BACKED_OFF.max(self.ceiling) + self.byte_time(bytes))
    }
}

/// Batch size (transactions per request) that follows the loss on the
/// link.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FrameSizer {
    size: usize,
    max: usize,
    /// Slow start: the size the link has been shown to carry, one more
    /// per clean reply.
    reach: usize,
    /// Tries of requests, tries answered, and the bytes those tries
    /// carried (request and reply), each decayed by [`LOSS_MEMORY`].
    tries: f64,
    answered: f64,
    bytes: f64,
}

/// Tries the loss estimate remembers: a weight of 1 − 1/64 per try, so
/// it follows a change of the line within a few windows' worth.
const LOSS_MEMORY: f64 = 64.0;

/// What a request of `b` transactions costs on this link, for
/// [`FrameSizer::choose`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FrameCost {
    /// Wire bytes of a request and its reply with no transaction (header,
    /// CRC, framing, the reply's adapter time).
    pub fixed_bytes: f64,
    /// Wire bytes one transaction adds, request and reply together.
    pub bytes_per_tx: f64,
    /// The part of a try's time that does not grow with its bytes, over
    /// the requests in flight that share it.
    pub fixed_time: Duration,
    /// Time per byte on the wire.
    pub per_byte: Duration,
}

impl FrameSizer {
    /// Starts at one, in slow start.
    pub fn new(max: usize) -> Self {
        let max = max.max(1);
        FrameSizer { size: 1, max, reach: 1, tries: 0.0, answered: 0.0, bytes: 0.0 }
    }

    /// The size chosen last.
    pub fn size(&self) -> usize {
        self.size
    }

    pub fn max(&self) -> usize {
        self.max
    }

    /// A reply came back to a request sent once: the link carries the
    /// size in use, so slow start may go one further.
    pub fn clean(&mut self) {
        self.reach = (self.reach.max(self.size) + 1).min(self.max);
    }

    /// A request of `bytes` wire bytes (request and reply) went `tries`
    /// times and `answered` of those tries came back (a request re-sent
    /// needlessly is answered twice).
    pub fn tried(&mut self, tries: u32, answered: u32, bytes: usize) {
        // Past a few thousand tries the old counts weigh nothing anyway.
        let keep = (1.0 - 1.0 / LOSS_MEMORY).powi(tries.max(answered).min(1 << 16) as i32);
        self.tries = self.tries * keep + tries as f64;
        self.answered = (self.answered * keep + answered as f64).min(self.tries);
        self.bytes = self.bytes * keep + tries as f64 * bytes as f64;
    }

    /// Estimated loss per wire byte, λ: a frame of L bytes crosses both
    /// ways with probability e^(−λ·L), so the share of tries answered, s,
    /// over the mean try length L̄ gives λ = −ln(s)/L̄. Zero before any
    /// try and on a clean link.
    pub fn loss_per_byte(&self) -> f64 {
        if self.tries < 0.5 || self.bytes <= 0.0 {
            return 0.0;
        }
        // Never below one try in 1,000: an estimate of infinity would fix
        // the size at one whatever the link does next.
        let share = (self.answered / self.tries).clamp(1e-3, 1.0);
        -share.ln() / (self.bytes / self.tries)
    }

    /// Picks the size that moves the most transactions per unit of time:
    /// b transactions, L = fixed + b·per_tx bytes, each try crossing with
    /// probability e^(−λ·L) and taking fixed_time + L·per_byte, so
    /// b·e^(−λ·L) / (fixed_time + L·per_byte) is largest. On a clean link
    /// that is the largest size; at λ per byte it is near 1/(λ·per_tx)
    /// when time is fixed, smaller when time grows with the bytes. Never
    /// above what slow start has reached.
    pub fn choose(&mut self, cost: FrameCost) -> usize {
        let lambda = self.loss_per_byte();
        let (t0, tb) = (cost.fixed_time.as_secs_f64(), cost.per_byte.as_secs_f64());
        let rate = |b: usize| {
            let len = cost.fixed_bytes + b as f64 * cost.bytes_per_tx;
            b as f64 * (-lambda * len).exp() / (t0 + len * tb).max(1e-12)
        };
        let top = self.reach.min(self.max);
        // Ties go to the larger size (a clean link with no timing yet).
        self.size = (1..=top).fold(1, |best, b| if rate(b) >= rate(best) { b } else { best });
        self.size
    }
}

/// How noisy the line is: the share of frames from the adapter that
/// arrived corrupt (a bad CRC or broken framing), over about the last
/// 64 frames. Unlike the share of tries answered it does not
/// mistake a host that woke late (a resend before the reply came) for a
/// bad line: a corrupt frame is the line's doing.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct LineNoise {
    frames: f64,
    corrupt: f64,
}

impl LineNoise {
    /// Counts `good` frames received whole and `corrupt` ones dropped.
    pub fn add(&mut self, good: u64, corrupt: u64) {
        let all = good.saturating_add(corrupt);
        let keep = (1.0 - 1.0 / LOSS_MEMORY).powi(all.min(1 << 16) as i32);
        self.frames = self.frames * keep + all as f64;
        self.corrupt = self.corrupt * keep + corrupt as f64;
    }

    /// Share of recent frames that arrived corrupt; zero before any.
    pub fn share(&self) -> f64 {
        if self.frames < 0.5 { 0.0 } else { (self.corrupt / self.frames).clamp(0.0, 1.0) }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ms(v: f64) -> Duration {
        Duration::from_secs_f64(v / 1000.0)
    }

    fn close(a: Duration, b: Duration) -> bool {
        a.abs_diff(b) < Duration::from_micros(1)
    }

    // A prior from a baud rate the line does not have (a pseudo-terminal
    // ignores it) is bounded by what the samples show: 100 bytes in
    // 0.2 ms cannot take 86.8 µs a byte.
    #[test]
    fn a_wrong_baud_prior_gives_way_to_the_samples() {
        let mut t = RetransmitTimer::new(ms(2.0), ms(100.0)).assuming_byte_time(Duration::from_micros(87));
        assert_eq!(t.byte_time(100), Duration::from_micros(8700), "before any sample: the prior");
        t.sample_sized(ms(0.2), 100);
        assert!(t.per_byte() <= Duration::from_nanos(2000), "{:?}", t.per_byte());
        assert!(t.rto_sized(100) < ms(2.5), "{:?}", t.rto_sized(100));
    }

    // Worked by hand, a weight of 63/64 per frame: 99 good and 1 corrupt
    // give 1/100; 100 more good ones keep (63/64)^100 = e^(100·ln(63/64))
    // = e^(−1.5748) = 0.20705 of the old counts, so the share is
    // 0.20705 / (100·0.20705 + 100) = 0.0017153.
    #[test]
    fn line_noise_is_the_decayed_share_of_corrupt_frames() {
        let mut n = LineNoise::default();
        assert_eq!(n.share(), 0.0, "no frames yet");
        n.add(99, 1);
        assert!((n.share() - 0.01).abs() < 1e-12, "{}", n.share());
        n.add(100, 0);
        assert!((n.share() - 0.0017153).abs() < 1e-6, "{}", n.share());
    }

    // RFC 6298 §2.2 and §2.3 worked by hand, floor (G) 2 ms, ceiling 100 ms:
    //   R1 = 10 ms:  SRTT = 10,      RTTVAR = 5,                         RTO = 10 + 20      = 30 ms
    //   R2 = 14 ms:  RTTVAR = 3/4·5 + 1/4·|10-14| = 4.75, SRTT = 7/8·10 + 1/8·14 = 10.5,  RTO = 10.5 + 19 = 29.5 ms
    //   R3 = 6 ms:   RTTVAR = 3/4·4.75 + 1/4·|10.5-6| = 4.6875, SRTT = 7/8·10.5 + 6/8 = 9.9375, RTO = 9.9375 + 18.75 = 28.6875 ms
    //   R4 = 10 ms x 40: RTTVAR decays towards 0, so 4·RTTVAR falls below
    //   G and RTO = SRTT + G, about 12 ms.
    #[test]
    fn the_estimator_follows_rfc_6298_section_2() {
        let mut t = RetransmitTimer::new(ms(2.0), ms(100.0));
        assert_eq!(t.rto(), ms(100.0), "no sample yet: the ceiling");
        t.sample(ms(10.0));
        assert!(close(t.rto(), ms(30.0)), "{:?}", t.rto());
        t.sample(ms(14.0));
        assert!(close(t.srtt().unwrap(), ms(10.5)) && close(t.rto(), ms(29.5)), "{:?}", t);
        t.sample(ms(6.0));
        assert!(close(t.srtt().unwrap(), ms(9.9375)) && close(t.rto(), ms(28.6875)), "{:?}", t);
        for _ in 0..40 {
            t.sample(ms(10.0));
        }
        assert!(t.rto() > ms(11.9) && t.rto() < ms(12.1), "SRTT + G once the variance is gone: {:?}", t.rto());
    }

    // The floor and the ceiling bound every RTO; backoff doubles (RFC 6298
    // §5.5) up to its own cap.
    #[test]
    fn the_rto_stays_between_floor_and_ceiling_and_backs_off() {
        let mut t = RetransmitTimer::new(ms(2.0), ms(100.0));
        t.sample(ms(0.1));
        // SRTT = 0.1, RTTVAR = 0.05: RTO = 0.1 + max(G = 2, 0.2) = 2.1 ms.
        assert!(close(t.rto(), ms(2.1)), "{:?}", t.rto());
        t.sample(ms(900.0));
        assert_eq!(t.rto(), ms(100.0), "a slow sample is capped at the ceiling");
        assert_eq!(t.backed_off(0), ms(100.0));
        assert_eq!(t.backed_off(1), ms(200.0));
        assert_eq!(t.backed_off(30), ms(200.0), "at most doubled, never overflowing");
        let mut slow = RetransmitTimer::new(ms(2.0), ms(1800.0));
        slow.sample(ms(1700.0));
        assert_eq!(slow.backed_off(3), MAX_BACKED_OFF, "and never past the cap");
    }

    // A 115200-baud line, 10 bits a byte: 86.8 µs per byte, plus 1 ms
    // fixed. Samples of 40 to 400 bytes (the sizes a growing batch sends)
    // teach the slope, so a 600-byte request gets a timer that covers its
    // 52 ms of wire time, where the fixed-size RTO learned from the same
    // samples would fire before the reply could arrive.
    #[test]
    fn the_timer_learns_the_time_per_byte() {
        let per_byte = 10.0 / 115_200.0 * 1000.0; // ms
        let mut t = RetransmitTimer::new(ms(2.0), ms(100.0));
        for i in 0..60 {
            let x = 40 + (i % 10) * 40;
            t.sample_sized(ms(1.0 + per_byte * x as f64), x);
        }
        let b = t.per_byte().as_secs_f64() * 1e6;
        assert!((b - 86.8).abs() < 1.0, "µs per byte: {b}");
        let wire = ms(per_byte * 600.0);
        assert!(t.rto_sized(600) > ms(1.0) + wire, "{:?}", t.rto_sized(600));
        // The fitted wire time gets a quarter more as margin.
        assert!(t.rto_sized(600) < ms(1.0) + wire * 5 / 4 + ms(3.0), "and not much more: {:?}", t.rto_sized(600));
        assert!(t.rto() < ms(3.1), "the fixed part alone: {:?}", t.rto());
        // Equal lengths teach no slope: RFC 6298 as before.
        let mut same = RetransmitTimer::new(ms(2.0), ms(100.0));
        same.sample_sized(ms(10.0), 100);
        same.sample_sized(ms(14.0), 100);
        assert_eq!(same.per_byte(), Duration::ZERO);
        assert!(close(same.rto(), ms(29.5)), "{:?}", same.rto());
    }

    // RFC 8985 §7.2: PTO = 2·SRTT, never above the RTO. First sample
    // 10 ms: SRTT = 10, RTTVAR = 5, RTO = 30 ms (as above), PTO = 20 ms.
    // A 0.1 ms sample with a 0.25 ms floor: 2·SRTT = 0.2 ms is below the
    // floor, so the probe waits 0.25 ms while the RTO is
    // 0.1 + max(0.25, 4·0.05) = 0.35 ms.
    #[test]
    fn the_probe_waits_twice_the_round_trip_within_floor_and_rto() {
        let mut t = RetransmitTimer::new(ms(2.0), ms(100.0));
        assert_eq!(t.probe_sized(0), t.rto(), "no sample: the RTO");
        t.sample(ms(10.0));
        assert!(close(t.probe_sized(0), ms(20.0)) && close(t.rto(), ms(30.0)), "{:?}", t.probe_sized(0));
        let mut fast = RetransmitTimer::new(ms(0.25), ms(100.0));
        fast.sample(ms(0.1));
        assert!(close(fast.probe_sized(0), ms(0.25)) && close(fast.rto(), ms(0.35)), "{:?}", fast);
    }

    fn cost(per_byte: Duration) -> FrameCost {
        // λ·c = 0.1 with λ = ln 2 / 100 (below): c = 10 / ln 2 per transaction.
        FrameCost { fixed_bytes: 30.0, bytes_per_tx: 10.0 / std::f64::consts::LN_2, fixed_time: ms(0.1), per_byte }
    }

    // Slow start: one more per clean reply, up to the adapter's limit.
    // Then half the tries of 100-byte frames answered: λ = ln 2 / 100 per
    // byte. Worked by hand with λ·c = 0.1, fixed 30 bytes:
    // - time fixed (τ = 0): b·e^(−λ·c·b) is largest at b = 1/(λ·c) = 10
    //   (10/9·e^(−0.1) = 1.0055 > 1, 11/10·e^(−0.1) = 0.9953 < 1);
    // - time by the bytes (t0 ≈ 0): b·e^(−0.1·b)/(30 + 14.43·b) is
    //   0.03033 at 3, 0.03057 at 4, 0.02970 at 5: b = 4.
    // A clean link afterwards: λ falls towards 0 and the size returns to
    // the limit.
    #[test]
    fn the_batch_follows_the_measured_loss() {
        let mut s = FrameSizer::new(32);
        assert_eq!(s.choose(cost(Duration::ZERO)), 1, "starts at one");
        for _ in 0..31 {
            s.clean();
        }
        assert_eq!(s.choose(cost(Duration::ZERO)), 32, "a clean link: the limit");
        for _ in 0..200 {
            s.tried(2, 1, 100);
        }
        let lambda = s.loss_per_byte();
        assert!((lambda - std::f64::consts::LN_2 / 100.0).abs() < 1e-9, "{lambda}");
        assert_eq!(s.choose(cost(Duration::ZERO)), 10, "fixed time per try");
        let by_bytes = FrameCost { fixed_time: Duration::from_nanos(1), ..cost(Duration::from_micros(87)) };
        assert_eq!(s.choose(by_bytes), 4, "time grows with the bytes (a slow UART)");
        for _ in 0..2000 {
            s.tried(1, 1, 100);
        }
        assert!(s.loss_per_byte() < 1e-6, "{}", s.loss_per_byte());
        assert_eq!(s.choose(cost(Duration::ZERO)), 32, "back at the limit");
        // However many tries a request took, the estimate stays finite.
        let mut huge = FrameSizer::new(32);
        huge.tried(u32::MAX, 1, 100);
        assert!(huge.loss_per_byte().is_finite() && huge.loss_per_byte() > 0.0, "{}", huge.loss_per_byte());
        // A needless resend answered twice is no loss.
        let mut d = FrameSizer::new(8);
        d.tried(2, 1, 50);
        d.tried(0, 1, 0);
        assert_eq!(d.loss_per_byte(), 0.0);
    }
}
