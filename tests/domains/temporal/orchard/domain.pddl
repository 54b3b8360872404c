; Orchard drones: an invented scenario for the deadline checker's tests.
; Drones fly between fields (flight time = distance), spray a field while it is
; open (timed initial literals), recharge on a pad (a fixed gain, whatever the
; time taken) and refill their tank instantly on a pad.
(define (domain orchard-drones)
  (:requirements :typing :durative-actions :fluents :timed-initial-literals
                 :negative-preconditions :duration-inequalities)
  (:types drone field)
  (:predicates (at ?d - drone ?f - field) (idle ?d - drone) (sprayed ?f - field)
               (open ?f - field) (pad ?f - field) (busy ?f - field))
  (:functions (charge ?d - drone) (tank ?d - drone) (distance ?a ?b - field))
  (:durative-action fly
    :parameters (?d - drone ?a ?b - field)
    :duration (= ?duration (distance ?a ?b))
    :condition (and (at start (at ?d ?a)) (at start (idle ?d))
                    (at start (>= (charge ?d) (distance ?a ?b))))
    :effect (and (at start (not (at ?d ?a))) (at start (not (idle ?d)))
                 (at start (decrease (charge ?d) (distance ?a ?b)))
                 (at end (at ?d ?b)) (at end (idle ?d))))
  (:durative-action spray
    :parameters (?d - drone ?f - field)
    :duration (and (>= ?duration 1) (<= ?duration 3))
    :condition (and (at start (at ?d ?f)) (at start (idle ?d)) (at start (not (busy ?f)))
                    (over all (at ?d ?f)) (over all (open ?f)) (at end (>= (tank ?d) 1)))
    :effect (and (at start (not (idle ?d))) (at start (busy ?f))
                 (at end (not (busy ?f))) (at end (idle ?d)) (at end (sprayed ?f))
                 (at end (decrease (tank ?d) 1))))
  (:durative-action recharge
    :parameters (?d - drone ?f - field)
    :duration (and (>= ?duration 1) (<= ?duration 4))
    :condition (and (at start (pad ?f)) (at start (idle ?d)) (over all (at ?d ?f)))
    :effect (and (at start (not (idle ?d))) (at end (idle ?d))
                 (at end (increase (charge ?d) 3))))
  (:action refill
    :parameters (?d - drone ?f - field)
    :precondition (and (pad ?f) (at ?d ?f) (idle ?d))
    :effect (assign (tank ?d) 2)))
