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

static volatile uint16_t t1_high;

static volatile uint8_t tx_ring[256];
static volatile uint8_t tx_head, tx_tail;
static volatile uint8_t rx_ring[64];
static volatile uint8_t rx_head, rx_tail;

__attribute__((always_inline)) static inline bl_mask_t levels_of(uint8_t pind, uint8_t pinb)
{
    return (bl_mask_t)((uint8_t)(~pind & IN_D_MASK) >> 2 | (uint8_t)((~pinb & IN_B_MASK) << 6));
}

/* Interrupts disabled. TOV1 set with a small count means the overflow has not been counted yet. */
__attribute__((always_inline)) static inline uint32_t ticks_with(uint16_t lo)
{
    uint16_t hi = t1_high;
    if ((TIFR1 & _BV(TOV1)) && lo < 0x8000u)
        hi++;
    return ((uint32_t)hi << 16) | lo;
}

ISR(TIMER1_OVF_vect)
{
    t1_high++;
}

/*
 * Pin change: a naked stub samples both input ports and the counter within a few cycles of the
 * vector (no register saving before it: in/out/lds/sts/push leave SREG alone), parks them in
 * GPIOR0/GPIOR1 and cap_lo, then jumps to the ordinary handler, whose long prologue no longer
 * stands between the pin change and its timestamp. The time from pin change to sample is the
 * capture latency; a pulse shorter than it is seen as no change at all (counted, see README).
 */
volatile uint16_t bl_avr_cap_lo;

void __vector_capture_d(void) __attribute__((signal, used, externally_visible));
void __vector_capture_d(void)
{
    bl_capture_isr(ticks_with(bl_avr_cap_lo), levels_of(GPIOR0, GPIOR1), 0x3Fu);
}

void __vector_capture_b(void) __attribute__((signal, used, externally_visible));
void __vector_capture_b(void)
{
    bl_capture_isr(ticks_with(bl_avr_cap_lo), levels_of(GPIOR0, GPIOR1), 0xC0u);
}

/* in/out/lds/sts/push leave SREG alone, so the stub needs no register saving before its samples */
#define CAPTURE_STUB(body)                                                                             \
    __asm__ __volatile__("push r24\n\t"                                                               \
                         "in r24, %[pind]\n\t"                                                        \
                         "out %[g0], r24\n\t"                                                         \
                         "in r24, %[pinb]\n\t"                                                        \
                         "out %[g1], r24\n\t"                                                         \
                         "lds r24, %[tl]\n\t" /* low byte first: latches the high byte */             \
                         "sts bl_avr_cap_lo, r24\n\t"                                                 \
                         "lds r24, %[th]\n\t"                                                         \
                         "sts bl_avr_cap_lo+1, r24\n\t"                                               \
                         "pop r24\n\t"                                                                \
                         "jmp " body "\n\t" ::[pind] "I"(_SFR_IO_ADDR(PIND)),                         \
                         [pinb] "I"(_SFR_IO_ADDR(PINB)), [g0] "I"(_SFR_IO_ADDR(GPIOR0)),               \
                         [g1] "I"(_SFR_IO_ADDR(GPIOR1)), [tl] "n"(_SFR_MEM_ADDR(TCNT1L)),              \
                         [th] "n"(_SFR_MEM_ADDR(TCNT1H)))

ISR(PCINT2_vect, ISR_NAKED)
{
    CAPTURE_STUB("__vector_capture_d");
}

ISR(PCINT0_vect, ISR_NAKED)
{
    CAPTURE_STUB("__vector_capture_b");
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
    uint8_t next = (uint8_t)((rx_head + 1u) & 63u);
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
    rx_tail = (uint8_t)((rx_tail + 1u) & 63u);
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
