; A Tuesday night shift at Veyrun: two containers must reach the north berth,
; one of them through customs first.
(define (problem tuesday-night-shift)
  (:domain veyrun-harbour)
  (:objects north-berth - berth
            east-stack west-stack - yard
            customs-bay - customs
            carrier-7 - carrier
            reefer-12 crate-31 - container)
  (:init (carrier-at carrier-7 east-stack)
         (empty carrier-7)
         (stored reefer-12 east-stack)
         (stored crate-31 west-stack)
         (charger west-stack)
         (lane east-stack customs-bay) (lane customs-bay east-stack)
         (lane customs-bay north-berth) (lane north-berth customs-bay)
         (lane east-stack west-stack)  (lane west-stack east-stack)
         (lane west-stack north-berth) (lane north-berth west-stack)
         (= (lane-length east-stack customs-bay) 4) (= (lane-length customs-bay east-stack) 4)
         (= (lane-length customs-bay north-berth) 6) (= (lane-length north-berth customs-bay) 6)
         (= (lane-length east-stack west-stack) 3) (= (lane-length west-stack east-stack) 3)
         (= (lane-length west-stack north-berth) 7) (= (lane-length north-berth west-stack) 7)
         (= (charge carrier-7) 20)
         (= (elapsed) 0)
         (= (total-cost) 0))
  (:goal (and (stored reefer-12 north-berth) (inspected reefer-12)
              (stored crate-31 north-berth)))
  (:metric minimize (total-cost)))
