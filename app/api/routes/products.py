from __future__ import annotations

from fastapi import APIRouter, Response

from app.api.deps import CreateProduct, DbDep, ReadProduct
from app.api.problems import PROBLEM_RESPONSES
from app.schemas.products import ProductCreate, ProductList, ProductRead
from app.services import products

router = APIRouter(prefix="/api/v1/products", tags=["products"], responses=PROBLEM_RESPONSES)


@router.post("", response_model=ProductRead, status_code=201,
             responses={200: {"model": ProductRead, "description": "Identical repeat"}})
def create_product(
    data: ProductCreate, db: DbDep, who: CreateProduct, response: Response
) -> ProductRead:
    """Register a product: stack-up, side-B flip axis, limits and check points (admin). An
    identical repeat answers 200, a conflicting one 409."""
    created, product = products.create(db=db, data=data, actor=who.label)
    if not created:
        response.status_code = 200
    return product


@router.get("", response_model=ProductList)
def list_products(db: DbDep, _: ReadProduct) -> ProductList:
    """Every product's settings, by code."""
    return products.list_products(db=db)


@router.get("/{code}", response_model=ProductRead)
def get_product(code: str, db: DbDep, _: ReadProduct) -> ProductRead:
    """One product's settings."""
    return products.get(db=db, code=code)
