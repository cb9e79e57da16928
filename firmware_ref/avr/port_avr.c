/*
 * Port for an ATmega328P-class 8-bit AVR at 16 MHz (see ../README.md for pins and wiring).
 *
 * Time: Timer1 runs free at F_CPU / 8 = 2 MHz (0.5 us a tick); its overflow interrupt extends it
 * to 32 bits in software (a wrap every 2147 s). Edges: pin-change interrupts on PORTD 2-7 and PORTB
 * 0-1 (channels 0-7, pulled up, closed = low). UART0: 500000 baud, 8N1, normal speed (UBRR 1: 0.0 % error
 * at 16 MHz), interrupt-driven through a 256-byte transmit ring. Actuators: PORTC 0-5 and PORTB 2-3,
 * active high (drive a transistor stage, never a coil directly). Strap: PB4 tied low at reset boots
 * in the packed form; open (pulled up) boots in the line form.
 */
#include <avr/interrupt.h>
#include <avr/io.h>

#include "../core/bl_capture.h"
#include "../core/bl_core.h"
#include "../core/bl_port.h"

#ifndef F_CPU
#define F_CPU 16000000UL
#endif
#ifndef BL_BAUD
#define BL_BAUD 500000UL
#endif
#ifndef BL_BOARD_ID
#define BL_BOARD_ID "blref-avr8"
#endif

#define TICK_HZ (F_CPU / 8u)
#define UBRR_VALUE ((F_CPU + 8u * BL_BAUD) / (16u * BL_BAUD) - 1u) /* baud = F_CPU / (16 (UBRR + 1)) */

#define IN_D_MASK 0xFCu /* PD2..PD7 = channels 0..5 */
#define IN_B_MASK 0x03u /* PB0..PB1 = channels 6..7 */
#define OUT_C_MASK 0x3Fu /* PC0..PC5 = actuators 0..5 */
#define OUT_B_MASK 0x0Cu /* PB2..PB3 = actuators 6..7 */
#define STRAP_B _BV(PB4)

volatile uint16_t bl_avr_t1_high; /* the counter's high half (asm reads it by name) */

static volatile uint8_t tx_ring[256];
static volatile uint8_t tx_head, tx_tail;
static volatile uint8_t rx_ring[32];
static volatile uint8_t rx_head, rx_tail;

__attribute__((always_inline)) static inline bl_mask_t levels_of(uint8_t pind, uint8_t pinb)
{
    return (bl_mask_t)((uint8_t)(~pind & IN_D_MASK) >> 2 | (uint8_t)((~pinb & IN_B_MASK) << 6));
}

/* Interrupts disabled. TOV1 set with a small count means the overflow has not been counted yet. */
__attribute__((always_inline)) static inline uint32_t ticks_with(uint16_t lo)
{
    uint16_t hi = bl_avr_t1_high;
    if ((TIFR1 & _BV(TOV1)) && lo < 0x8000u)
        hi++;
    return ((uint32_t)hi << 16) | lo;
}

ISR(TIMER1_OVF_vect)
{
    bl_avr_t1_high++;
}

/*
 * Pin change, in two layers, so that a change arriving while an earlier one is being processed is
 * still sampled within a couple of microseconds:
 *
 * - a naked stub samples both input ports and the counter first thing, and appends them, with the
 *   counter's high half and overflow flag as they were at that moment, to a 16-entry ring of raw
 *   samples; interrupts are off for those 50-odd cycles only, then on again for the rest of it
 *   (nested stubs append in sampling order, and whichever finds no drain running starts one);
 * - unless a drain is already running, it then enters the drain: a handler that re-enables
 *   interrupts and feeds the raw samples, oldest first, to the core's capture queue. Further pin
 *   changes during the drain interrupt it and only add to the ring.
 *
 * The main loop only runs once the ring is empty, so its markers still queue in tick order. If the
 * ring is full a sample is lost; the next sample's changes are then counted as dropped rather than
 * given a wrong time.
 */
#define RAW_ENTRIES 16u
volatile uint8_t bl_avr_raw[RAW_ENTRIES * 8u];
volatile uint8_t bl_avr_raw_head, bl_avr_raw_tail; /* byte offsets into the ring, steps of 8 */
volatile uint8_t bl_avr_draining, bl_avr_raw_lost;

void __vector_capture_drain(void) __attribute__((interrupt, used, externally_visible));
void __vector_capture_drain(void)
{
    static uint8_t seen_lost;
    for (;;) {
        while (bl_avr_raw_tail != bl_avr_raw_head) {
            const volatile uint8_t *e = &bl_avr_raw[bl_avr_raw_tail];
            uint16_t lo = (uint16_t)(e[2] | (uint16_t)e[3] << 8);
            uint16_t hi = (uint16_t)(e[4] | (uint16_t)e[5] << 8);
            if ((e[6] & _BV(TOV1)) && lo < 0x8000u)
                hi++;
            bl_mask_t levels = levels_of(e[0], e[1]);
            bl_mask_t own = e[7] ? 0xC0u : 0x3Fu;
            /* no critical section: the main loop, the queue's other producer, cannot run until the
             * drain is over, and nested stubs only touch the raw ring */
            if (bl_avr_raw_lost != seen_lost) {
                seen_lost = bl_avr_raw_lost;
                bl_isr_dropped += bl_popcount((bl_mask_t)(levels ^ bl_isr_levels));
                bl_isr_levels = levels;
                bl_isr_owed = 0;
            } else {
                bl_capture_isr(((uint32_t)hi << 16) | lo, levels, own);
            }
            bl_avr_raw_tail = (uint8_t)((bl_avr_raw_tail + 8u) & (RAW_ENTRIES * 8u - 1u));
        }
        cli();
        if (bl_avr_raw_tail == bl_avr_raw_head) {
            bl_avr_draining = 0;
            return; /* the epilogue restores SREG, interrupts on, and returns with reti */
        }
        sei();
    }
}

#define CAPTURE_STUB(id)                                                                               \
    __asm__ __volatile__("push r24\n\t"                                                               \
                         "in r24, %[pind]\n\t" /* sample first */                                     \
                         "push r25\n\t"                                                               \
                         "in r25, %[pinb]\n\t"                                                        \
                         "push r30\n\t"                                                               \
                         "lds r30, %[tl]\n\t" /* low byte first: latches the high byte */             \
                         "push r31\n\t"                                                               \
                         "lds r31, %[th]\n\t"                                                         \
                         "push r0\n\t"                                                                \
                         "in r0, __SREG__\n\t"                                                        \
                         "push r0\n\t"                                                                \
                         "push r26\n\t"                                                               \
                         "push r27\n\t"                                                               \
                         "push r28\n\t"                                                               \
                         "lds r26, bl_avr_raw_head\n\t"                                               \
                         "mov r28, r26\n\t"                                                           \
                         "subi r28, -8\n\t"                                                           \
                         "andi r28, %[wrap]\n\t"                                                      \
                         "lds r27, bl_avr_raw_tail\n\t"                                               \
                         "cp r28, r27\n\t"                                                            \
                         "brne 1f\n\t"                                                                \
                         "lds r24, bl_avr_raw_lost\n\t" /* ring full: count the lost sample */        \
                         "inc r24\n\t"                                                                \
                         "sts bl_avr_raw_lost, r24\n\t"                                               \
                         "rjmp 2f\n"                                                                  \
                         "1:\n\t"                                                                     \
                         "ldi r27, 0\n\t" /* X = ring + head */                                     \
                         "subi r26, lo8(-(bl_avr_raw))\n\t"                                           \
                         "sbci r27, hi8(-(bl_avr_raw))\n\t"                                           \
                         "st X+, r24\n\t"                                                             \
                         "st X+, r25\n\t"                                                             \
                         "st X+, r30\n\t"                                                             \
                         "st X+, r31\n\t"                                                             \
                         "lds r24, bl_avr_t1_high\n\t"                                                \
                         "st X+, r24\n\t"                                                             \
                         "lds r24, bl_avr_t1_high+1\n\t"                                              \
                         "st X+, r24\n\t"                                                             \
                         "in r24, %[tifr]\n\t"                                                        \
                         "st X+, r24\n\t"                                                             \
                         "ldi r24, " #id "\n\t"                                                       \
                         "st X, r24\n\t"                                                              \
                         "sts bl_avr_raw_head, r28\n"                                                 \
                         "2:\n\t"                                                                     \
                         "sei\n\t" /* the sample is in the ring: let the next edge in */               \
                         "lds r24, bl_avr_draining\n\t"                                               \
                         "tst r24\n\t"                                                                \
                         "brne 3f\n\t"                                                                \
                         "ldi r24, 1\n\t"                                                             \
                         "sts bl_avr_draining, r24\n\t"                                               \
                         "pop r28\n\t"                                                                \
                         "pop r27\n\t"                                                                \
                         "pop r26\n\t"                                                                \
                         "pop r0\n\t"                                                                 \
                         "out __SREG__, r0\n\t"                                                       \
                         "pop r0\n\t"                                                                 \
                         "pop r31\n\t"                                                                \
                         "pop r30\n\t"                                                                \
                         "pop r25\n\t"                                                                \
                         "pop r24\n\t"                                                                \
                         "jmp __vector_capture_drain\n"                                               \
                         "3:\n\t"                                                                     \
                         "pop r28\n\t"                                                                \
                         "pop r27\n\t"                                                                \
                         "pop r26\n\t"                                                                \
                         "pop r0\n\t"                                                                 \
                         "out __SREG__, r0\n\t"                                                       \
                         "pop r0\n\t"                                                                 \
                         "pop r31\n\t"                                                                \
                         "pop r30\n\t"                                                                \
                         "pop r25\n\t"                                                                \
                         "pop r24\n\t"                                                                \
                         "reti\n\t" ::[pind] "I"(_SFR_IO_ADDR(PIND)),                                 \
                         [pinb] "I"(_SFR_IO_ADDR(PINB)), [tifr] "I"(_SFR_IO_ADDR(TIFR1)),              \
                         [tl] "n"(_SFR_MEM_ADDR(TCNT1L)), [th] "n"(_SFR_MEM_ADDR(TCNT1H)),             \
                         [wrap] "M"(RAW_ENTRIES * 8u - 1u))

ISR(PCINT2_vect, ISR_NAKED)
{
    CAPTURE_STUB(0);
}

ISR(PCINT0_vect, ISR_NAKED)
{
    CAPTURE_STUB(1);
}

ISR(USART_UDRE_vect)
{
    if (tx_head == tx_tail) {
        UCSR0B &= (uint8_t)~_BV(UDRIE0);
        return;
    }
    UDR0 = tx_ring[tx_tail];
    tx_tail = (uint8_t)(tx_tail + 1u);
}

ISR(USART_RX_vect)
{
    uint8_t c = UDR0;
    uint8_t next = (uint8_t)((rx_head + 1u) & 31u);
    if (next != rx_tail) { /* a full ring drops the byte; the command parser then sees a bad line */
        rx_ring[rx_head] = c;
        rx_head = next;
    }
}

uint32_t bl_port_now(void)
{
    uint8_t s = SREG;
    cli();
    uint32_t t = ticks_with(TCNT1);
    SREG = s;
    return t;
}

bl_mask_t bl_port_read_levels(void)
{
    return levels_of(PIND, PINB);
}

void bl_port_set_actuator(uint8_t channel, uint8_t on)
{
    volatile uint8_t *port = channel < 6 ? &PORTC : &PORTB;
    uint8_t bit = channel < 6 ? (uint8_t)_BV(channel) : (uint8_t)_BV(channel - 6u + 2u);
    if (channel >= 8)
        return;
    uint8_t s = SREG;
    cli();
    if (on)
        *port |= bit;
    else
        *port &= (uint8_t)~bit;
    SREG = s;
}

uint16_t bl_port_tx_room(void)
{
    return (uint16_t)(255u - (uint8_t)(tx_head - tx_tail));
}

void bl_port_tx(uint8_t byte)
{
    uint8_t s = SREG;
    cli();
    tx_ring[tx_head] = byte;
    tx_head = (uint8_t)(tx_head + 1u);
    UCSR0B |= _BV(UDRIE0);
    SREG = s;
}

int bl_port_rx(void)
{
    if (rx_head == rx_tail)
        return -1;
    uint8_t c = rx_ring[rx_tail];
    rx_tail = (uint8_t)((rx_tail + 1u) & 31u);
    return c;
}

bl_irqstate_t bl_port_irq_save(void)
{
    uint8_t s = SREG;
    cli();
    return s;
}

void bl_port_irq_restore(bl_irqstate_t state)
{
    SREG = state;
}

int main(void)
{
    cli();
    /* inputs with pull-ups, the strap with its pull-up, actuators as outputs, off */
    DDRD &= (uint8_t)~IN_D_MASK;
    PORTD |= IN_D_MASK;
    DDRB = (uint8_t)((DDRB & ~(IN_B_MASK | STRAP_B)) | OUT_B_MASK);
    PORTB = (uint8_t)((PORTB | IN_B_MASK | STRAP_B) & ~OUT_B_MASK);
    DDRC |= OUT_C_MASK;
    PORTC &= (uint8_t)~OUT_C_MASK;

    TCCR1A = 0;
    TCCR1B = _BV(CS11); /* F_CPU / 8 */
    TCNT1 = 0;
    TIFR1 = _BV(TOV1);
    TIMSK1 = _BV(TOIE1);

    UBRR0 = UBRR_VALUE;
    UCSR0A = 0;
    UCSR0C = _BV(UCSZ01) | _BV(UCSZ00);
    UCSR0B = _BV(RXEN0) | _BV(TXEN0) | _BV(RXCIE0);

    /* let the pull-ups settle before the strap and the initial levels are read */
    for (volatile uint8_t i = 0; i < 100; i++) {
    }

    bl_board_t board = {.clock_hz = TICK_HZ, .counter_bits = 32, .channels = 8,
                        .packed = (PINB & STRAP_B) ? 0 : 1, .board_id = BL_BOARD_ID};
    bl_init(&board);

    PCMSK2 = IN_D_MASK;
    PCMSK0 = IN_B_MASK;
    PCIFR = _BV(PCIF2) | _BV(PCIF0);
    PCICR = _BV(PCIE2) | _BV(PCIE0);
    sei();
    for (;;)
        bl_poll();
}
