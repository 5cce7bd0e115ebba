import streamlit as st

st.title("patient")
