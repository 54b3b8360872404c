; Port of Veyrun (an invented harbour): electric straddle carriers move
; containers between berths, yard stacks and a customs bay. (elapsed) is the shift
; clock in minutes: driving a lane takes its length, handling a container 2,
; an inspection 5 and a recharge 8. limits.toml reads deadlines on it.
(define (domain veyrun-harbour)
  (:requirements :typing :negative-preconditions :conditional-effects
                 :numeric-fluents :action-costs)
  (:types berth yard customs - location
          carrier container - object)
  (:predicates (carrier-at ?c - carrier ?l - location)
               (stored ?k - container ?l - location)
               (holding ?c - carrier ?k - container)
               (empty ?c - carrier)
               (lane ?from ?to - location)
               (charger ?l - location)
               (inspected ?k - container))
  (:functions (charge ?c - carrier)
              (lane-length ?from ?to - location)
              (elapsed)
              (total-cost) - number)

  (:action drive
    :parameters (?c - carrier ?from ?to - location)
    :precondition (and (carrier-at ?c ?from) (lane ?from ?to)
                       (>= (charge ?c) (lane-length ?from ?to)))
    :effect (and (not (carrier-at ?c ?from)) (carrier-at ?c ?to)
                 (decrease (charge ?c) (lane-length ?from ?to))
                 (increase (elapsed) (lane-length ?from ?to))
                 (increase (total-cost) (lane-length ?from ?to))))

  (:action lift
    :parameters (?c - carrier ?k - container ?l - location)
    :precondition (and (carrier-at ?c ?l) (stored ?k ?l) (empty ?c))
    :effect (and (holding ?c ?k) (not (stored ?k ?l)) (not (empty ?c))
                 (increase (elapsed) 2) (increase (total-cost) 1)))

  (:action set-down
    :parameters (?c - carrier ?k - container ?l - location)
    :precondition (and (carrier-at ?c ?l) (holding ?c ?k))
    :effect (and (stored ?k ?l) (empty ?c) (not (holding ?c ?k))
                 (when (charger ?l) (increase (charge ?c) 5))
                 (increase (elapsed) 2) (increase (total-cost) 1)))

  (:action inspect
    :parameters (?k - container ?l - customs)
    :precondition (and (stored ?k ?l) (not (inspected ?k)))
    :effect (and (inspected ?k) (increase (elapsed) 5) (increase (total-cost) 2)))

  (:action recharge
    :parameters (?c - carrier ?l - location)
    :precondition (and (carrier-at ?c ?l) (charger ?l) (empty ?c))
    :effect (and (assign (charge ?c) 40) (increase (elapsed) 8) (increase (total-cost) 3))))
